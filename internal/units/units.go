// Package units converts the engineering units found on site sheets and
// design schedules to and from SI, which every other flowset package uses
// internally.
//
// Conversion factors come from their exact definitions where one exists
// (international inch and foot, avoirdupois pound, US gallon, standard
// gravity) and otherwise from NIST Special Publication 811 (2008),
// "Guide for the Use of the International System of Units", Appendix B.
// Every factor is defined once, in the table in this file.
package units

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
)

// Kind is the physical quantity a unit measures.
type Kind int

// The kinds of quantity flowset reads and prints. The zero Kind is not a
// quantity; it stands for "any kind" in errors from Find.
const (
	Flow               Kind = iota + 1 // volumetric flow rate, SI m3/s
	Pressure                           // pressure or pressure difference, SI Pa
	Length                             // SI m
	Temperature                        // absolute temperature, SI K
	Head                               // pump or friction head: a height of the pumped fluid, SI m
	Dimensionless                      // ratios, fractions, valve openings; SI 1
	Power                              // SI W
	Energy                             // SI J
	Velocity                           // SI m/s
	Density                            // mass density, SI kg/m3
	Viscosity                          // dynamic viscosity, SI Pa s
	KinematicViscosity                 // kinematic viscosity, SI m2/s
)

var kindNames = [...]string{
	0:                  "quantity",
	Flow:               "flow",
	Pressure:           "pressure",
	Length:             "length",
	Temperature:        "temperature",
	Head:               "head",
	Dimensionless:      "dimensionless quantity",
	Power:              "power",
	Energy:             "energy",
	Velocity:           "velocity",
	Density:            "density",
	Viscosity:          "dynamic viscosity",
	KinematicViscosity: "kinematic viscosity",
}

// String returns the lower-case name of the quantity, as used in messages.
func (k Kind) String() string {
	if k < 0 || int(k) >= len(kindNames) {
		return "kind(" + strconv.Itoa(int(k)) + ")"
	}
	return kindNames[k]
}

// Physical constants behind the water-column units.
const (
	// StandardGravity is the conventional acceleration of free fall g_n in
	// m/s2 (3rd CGPM, 1901; NIST SP 811 Appendix B).
	StandardGravity = 9.80665
	// WaterColumnDensity is the conventional water density in kg/m3 that
	// defines the water-column pressure units (NIST SP 811 Appendix B
	// "conventional" water-column factors). It is not the density of real
	// water at any temperature.
	WaterColumnDensity = 1000
)

// Exact definitions the table builds on.
const (
	inch     = 0.0254                                   // m, international inch (1959)
	foot     = 12 * inch                                // m
	poundM   = 0.45359237                               // kg, avoirdupois pound (1959)
	poundF   = poundM * StandardGravity                 // N, pound-force
	usGallon = 231 * inch * inch * inch                 // m3, US liquid gallon = 231 in3
	mWater   = WaterColumnDensity * StandardGravity * 1 // Pa per metre of conventional water column
	btuIT    = 1055.05585262                            // J, International Table Btu (NIST SP 811 B.8)
)

// Unit is one unit of a Kind. The zero Unit is not valid; get units from
// Lookup, Find or SI.
type Unit struct {
	Symbol string
	Kind   Kind
	scale  float64 // SI value of one unit, after adding offset
	offset float64 // added before scaling; non-zero only for °C and °F
}

// ToSI converts v in u to SI: (v + offset) · scale.
func (u Unit) ToSI(v float64) float64 { return (v + u.offset) * u.scale }

// FromSI converts v in SI to u.
func (u Unit) FromSI(v float64) float64 { return v/u.scale - u.offset }

// entry is one row of the unit table: a canonical symbol, the other
// spellings accepted for it, and the conversion.
type entry struct {
	kind    Kind
	symbols []string // first is the canonical symbol, used for printing
	scale   float64
	offset  float64
}

// table is the single definition of every unit. The first entry of each kind
// is its SI unit. Order matters for Find: a symbol used by two kinds (m, ft
// are both Length and Head) resolves to the earlier row.
//
// Water-column units are the "conventional" ones of NIST SP 811 Appendix B:
// 1 mH2O = ρ·g_n·1 m with ρ = 1000 kg/m3 and g_n = 9.80665 m/s2, i.e.
// 9.80665 kPa exactly; 1 ftH2O = 0.3048 mH2O (2.989067 kPa); 1 inH2O =
// 0.0254 mH2O (249.0889 Pa). To turn a head of a real fluid into pressure,
// use HeadToPressure with that fluid's density instead.
var table = []entry{
	{Flow, []string{"m3/s", "m³/s", "m^3/s"}, 1, 0},
	{Flow, []string{"m3/h", "m³/h", "m^3/h", "m3/hr", "m³/hr", "cmh"}, 1.0 / 3600, 0},
	{Flow, []string{"l/s", "L/s", "l/sec", "L/sec", "lps"}, 1e-3, 0},
	{Flow, []string{"l/min", "L/min", "lpm"}, 1e-3 / 60, 0},
	{Flow, []string{"l/h", "L/h", "l/hr", "L/hr", "lph"}, 1e-3 / 3600, 0},
	{Flow, []string{"gpm", "USgpm", "gal/min"}, usGallon / 60, 0},

	{Pressure, []string{"Pa"}, 1, 0},
	{Pressure, []string{"kPa"}, 1e3, 0},
	{Pressure, []string{"MPa"}, 1e6, 0},
	{Pressure, []string{"mbar"}, 100, 0},
	{Pressure, []string{"bar"}, 1e5, 0},
	{Pressure, []string{"psi", "lbf/in2", "lbf/in²"}, poundF / (inch * inch), 0},
	{Pressure, []string{"mH2O", "mH₂O", "m wc", "mwc", "mWC", "m WC", "m w.c."}, mWater, 0},
	{Pressure, []string{"ftH2O", "ftH₂O", "ft wc", "ftwc", "ft WC", "ft w.c."}, foot * mWater, 0},
	{Pressure, []string{"inH2O", "inH₂O", "in wc", "inwc", "in WC", "in w.c."}, inch * mWater, 0},

	{Length, []string{"m"}, 1, 0},
	{Length, []string{"mm"}, 1e-3, 0},
	{Length, []string{"cm"}, 1e-2, 0},
	{Length, []string{"in", "inch", `"`}, inch, 0},
	{Length, []string{"ft", "foot", "feet", "'"}, foot, 0},

	{Temperature, []string{"K"}, 1, 0},
	{Temperature, []string{"°C", "degC", "C", "ºC", "℃"}, 1, 273.15},
	// T/K = (t/°F + 459.67)/1.8 (NIST SP 811 B.9).
	{Temperature, []string{"°F", "degF", "F", "ºF", "℉"}, 1 / 1.8, 459.67},

	{Head, []string{"m", "mhd", "m head"}, 1, 0},
	{Head, []string{"ft", "ft head", "feet"}, foot, 0},

	{Dimensionless, []string{"", "1", "-"}, 1, 0},
	{Dimensionless, []string{"%"}, 1e-2, 0},

	{Power, []string{"W"}, 1, 0},
	{Power, []string{"kW"}, 1e3, 0},
	{Power, []string{"MW"}, 1e6, 0},
	// Mechanical horsepower, 550 ft·lbf/s (NIST SP 811 B.8: 7.456999E+02 W).
	{Power, []string{"hp"}, 550 * foot * poundF, 0},
	{Power, []string{"Btu/h", "BTU/h", "Btu/hr", "BTU/hr", "Btuh"}, btuIT / 3600, 0},

	{Energy, []string{"J"}, 1, 0},
	{Energy, []string{"kJ"}, 1e3, 0},
	{Energy, []string{"MJ"}, 1e6, 0},
	{Energy, []string{"Wh"}, 3600, 0},
	{Energy, []string{"kWh"}, 3.6e6, 0},
	{Energy, []string{"MWh"}, 3.6e9, 0},
	{Energy, []string{"Btu", "BTU"}, btuIT, 0},

	{Velocity, []string{"m/s"}, 1, 0},
	{Velocity, []string{"ft/s", "fps"}, foot, 0},

	{Density, []string{"kg/m3", "kg/m³", "kg/m^3"}, 1, 0},
	{Density, []string{"g/cm3", "g/cm³", "g/ml", "g/mL", "kg/l", "kg/L"}, 1e3, 0},
	{Density, []string{"lb/ft3", "lb/ft³", "lbm/ft3"}, poundM / (foot * foot * foot), 0},

	// 1 cP = 1 mPa s (NIST SP 811 B.8: centipoise 1.0E-03 Pa s).
	{Viscosity, []string{"Pa s", "Pa·s", "Pa.s"}, 1, 0},
	{Viscosity, []string{"mPa s", "mPa·s", "mPa.s", "cP", "cp"}, 1e-3, 0},

	// 1 cSt = 1 mm2/s (NIST SP 811 B.8: centistokes 1.0E-06 m2/s).
	{KinematicViscosity, []string{"m2/s", "m²/s", "m^2/s"}, 1, 0},
	{KinematicViscosity, []string{"mm2/s", "mm²/s", "mm^2/s", "cSt", "cst"}, 1e-6, 0},
	{KinematicViscosity, []string{"ft2/s", "ft²/s"}, foot * foot, 0},
}

// Sentinel causes wrapped by the errors of Lookup and Find.
var (
	ErrUnknownUnit = errors.New("unknown unit")
	ErrWrongKind   = errors.New("wrong kind of unit")
)

// UnitError reports a symbol that could not be used as a unit of the kind
// wanted. Err is ErrUnknownUnit or ErrWrongKind.
type UnitError struct {
	Symbol string
	Want   Kind // 0 when any kind would do
	Have   Kind // the symbol's kind when Err is ErrWrongKind
	Err    error
}

func (e *UnitError) Error() string {
	if errors.Is(e.Err, ErrWrongKind) {
		return fmt.Sprintf("unit %q is a %s, not a %s", e.Symbol, e.Have, e.Want)
	}
	if e.Want == 0 {
		return fmt.Sprintf("unknown unit %q", e.Symbol)
	}
	return fmt.Sprintf("unknown %s unit %q (accepted: %s)", e.Want, e.Symbol, strings.Join(Symbols(e.Want), ", "))
}

func (e *UnitError) Unwrap() error { return e.Err }

func (e entry) unit(symbol string) Unit {
	return Unit{Symbol: symbol, Kind: e.kind, scale: e.scale, offset: e.offset}
}

// Lookup returns the unit of kind k spelled symbol. Surrounding spaces are
// ignored; case is significant (mbar and Mbar, mPa and MPa differ). The
// returned Unit carries the canonical symbol (Lookup(Flow, "m³/h") has
// Symbol "m3/h"). The error wraps ErrWrongKind when symbol names a unit of
// another kind and ErrUnknownUnit otherwise.
func Lookup(k Kind, symbol string) (Unit, error) {
	s := strings.TrimSpace(symbol)
	var other Kind
	for _, e := range table {
		for _, sym := range e.symbols {
			if sym != s {
				continue
			}
			if e.kind == k {
				return e.unit(e.symbols[0]), nil
			}
			if other == 0 {
				other = e.kind
			}
		}
	}
	// A blank symbol is a missing unit, not a dimensionless one, unless a
	// dimensionless quantity was asked for.
	if other != 0 && s != "" {
		return Unit{}, &UnitError{Symbol: s, Want: k, Have: other, Err: ErrWrongKind}
	}
	return Unit{}, &UnitError{Symbol: s, Want: k, Err: ErrUnknownUnit}
}

// Find returns the unit spelled symbol, of any kind. A symbol shared by two
// kinds resolves to the first in table order: "m" and "ft" are lengths, not
// heads; use Lookup(Head, ...) for those.
func Find(symbol string) (Unit, error) {
	s := strings.TrimSpace(symbol)
	for _, e := range table {
		for _, sym := range e.symbols {
			if sym == s {
				return e.unit(e.symbols[0]), nil
			}
		}
	}
	return Unit{}, &UnitError{Symbol: s, Err: ErrUnknownUnit}
}

// SI returns the SI unit of k. For an unknown Kind it returns the zero Unit.
func SI(k Kind) Unit {
	for _, e := range table {
		if e.kind == k {
			return e.unit(e.symbols[0])
		}
	}
	return Unit{}
}

// Symbols returns every spelling accepted for units of kind k, canonical
// symbols first within each unit, in table order.
func Symbols(k Kind) []string {
	var out []string
	for _, e := range table {
		if e.kind == k {
			out = append(out, e.symbols...)
		}
	}
	return out
}

// Format prints v, a value in SI, in unit u with digits decimal places
// (digits < 0 gives the shortest exact representation), followed by a
// space and u's symbol. A value that is NaN or infinite prints as such.
func Format(v float64, u Unit, digits int) string {
	x := v
	if u.scale != 0 {
		x = u.FromSI(v)
	}
	var s string
	if digits < 0 {
		s = strconv.FormatFloat(x, 'g', -1, 64)
	} else {
		s = strconv.FormatFloat(x, 'f', digits, 64)
	}
	if u.Symbol == "" {
		return s
	}
	return s + " " + u.Symbol
}

// HeadToPressure converts a head h [m] of a fluid of density rho [kg/m3] to
// a pressure difference [Pa]: Δp = ρ g_n h.
func HeadToPressure(h, rho float64) float64 { return rho * StandardGravity * h }

// PressureToHead converts a pressure difference dp [Pa] to the head [m] of a
// fluid of density rho [kg/m3]: h = Δp / (ρ g_n).
func PressureToHead(dp, rho float64) float64 { return dp / (rho * StandardGravity) }
