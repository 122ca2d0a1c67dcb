// Package hydraulics holds the pressure-drop laws of the parts of a water
// circuit: pipes (Darcy-Weisbach with Colebrook-White), fittings, terminal
// units, balancing and control valves, and pumps. Each element gives its
// pressure drop at a flow and the derivative needed by Newton's method.
//
// Flows are volumetric in m3/s, pressures in Pa, lengths in m.
package hydraulics

import "flowset/internal/fluid"

// Element is one part of a circuit through which water flows.
//
// Drop returns the pressure drop dp [Pa] in the direction of the flow q
// [m3/s] and its derivative slope = d(dp)/dq [Pa s/m3]. Drop is odd in q
// (Drop(-q) = -Drop(q)) so reversed flow is handled; slope is never negative
// for a passive element. A pump returns a negative drop (a gain).
type Element interface {
	Drop(q float64, f fluid.State) (dp, slope float64)
}

// StaticHead is a pressure difference that does not depend on flow: the
// static lift of an open circuit (from the free surface a pump draws from to
// the open outlet, with the outlet's required pressure), Pa. Its slope is 0,
// so it is only used in series with an element whose slope is positive (a
// pump).
type StaticHead struct {
	Pressure float64 // Pa
}

// Drop implements Element: the same pressure at every flow.
func (s StaticHead) Drop(q float64, f fluid.State) (dp, slope float64) { return s.Pressure, 0 }
