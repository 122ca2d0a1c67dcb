// Package fluid gives the properties of the heat-transfer liquids flowset
// models: water (IAPWS-IF97 region 1 density, IAPWS 2008 viscosity) and
// ethylene- or propylene-glycol/water mixtures from published tables.
//
// All quantities are SI: temperature in kelvin, density in kg/m3, dynamic
// viscosity in Pa s.
package fluid

// State is a liquid's properties at one temperature, as the hydraulic
// elements need them.
type State struct {
	Temperature float64 // K
	Density     float64 // kg/m3
	Viscosity   float64 // dynamic, Pa s
}

// Kinematic returns the kinematic viscosity in m2/s.
func (s State) Kinematic() float64 { return s.Viscosity / s.Density }
