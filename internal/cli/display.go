package cli

import (
	"fmt"
	"math"
	"strconv"

	"flowset/internal/hydraulics"
	"flowset/internal/units"
)

// display is the set of units results are shown in on the console, the
// field sheets and the report. JSON outputs stay SI whatever it is.
type display struct {
	Name     string // "si" or "us"
	FlowUnit string // e.g. "l/s" or "gpm"
	DiffUnit string // e.g. "kPa" or "psi"
	flowU    units.Unit
	diffU    units.Unit
}

// displayUnits returns the display units by name: "si" (l/s, kPa),
// "si-m3h" (m3/h, kPa) or "us" (US gallons per minute, psi).
func displayUnits(name string) (display, error) {
	var f, d string
	switch name {
	case "", "si":
		name, f, d = "si", "l/s", "kPa"
	case "si-m3h":
		f, d = "m3/h", "kPa"
	case "us":
		f, d = "gpm", "psi"
	default:
		return display{}, fmt.Errorf("units %q: want si (l/s, kPa), si-m3h (m3/h, kPa) or us (gpm, psi)", name)
	}
	fu, err := units.Lookup(units.Flow, f)
	if err != nil {
		return display{}, err
	}
	du, err := units.Lookup(units.Pressure, d)
	if err != nil {
		return display{}, err
	}
	return display{Name: name, FlowUnit: f, DiffUnit: d, flowU: fu, diffU: du}, nil
}

// siDisplay is the default display.
func siDisplay() display {
	d, err := displayUnits("si")
	if err != nil {
		panic(err) // the table always has l/s and kPa
	}
	return d
}

// toFlow converts a flow in m3/s to the display unit.
func (u display) toFlow(q float64) float64 { return u.flowU.FromSI(q) }

// toDiff converts a differential in Pa to the display unit.
func (u display) toDiff(p float64) float64 { return u.diffU.FromSI(p) }

// flowNum formats a flow in the display unit without the unit: three
// decimals below 1, two up to 100, one above (gpm: one decimal).
func (u display) flowNum(q float64) string {
	if !finite(q) {
		return ""
	}
	v := u.toFlow(q)
	d := 1
	switch a := math.Abs(v); {
	case u.Name == "us" && a < 10:
		d = 2
	case u.Name == "us":
		d = 1
	case u.FlowUnit == "m3/h" && a < 10:
		d = 2
	case u.FlowUnit == "m3/h":
		d = 1
	case a < 1:
		d = 3
	case a < 100:
		d = 2
	}
	return strconv.FormatFloat(v, 'f', d, 64)
}

// diffNum formats a differential in the display unit without the unit: kPa
// to 0.1, psi to 0.01.
func (u display) diffNum(p float64) string {
	if !finite(p) {
		return ""
	}
	d := 1
	if u.Name == "us" {
		d = 2
	}
	return strconv.FormatFloat(u.toDiff(p)+0, 'f', d, 64)
}

func (u display) flow(q float64) string { return u.flowNum(q) + " " + u.FlowUnit }
func (u display) diff(p float64) string { return u.diffNum(p) + " " + u.DiffUnit }

// speed formats a speed ratio as a percentage of nominal.
func (u display) speed(r float64) string {
	if !finite(r) {
		return "-"
	}
	return fmt.Sprintf("%.1f %%", 100*r)
}

// cvPerKv is the ratio of a valve's Cv (US gpm at 1 psi) to its Kv (m3/h at
// 1 bar), from the unit table: (1 m3/h in gpm) / sqrt(1 bar in psi) = 1.156
// (IEC 60534-1 gives Kv = 0.865 Cv).
func (u display) cvPerKv() float64 {
	m3h, err1 := units.Lookup(units.Flow, "m3/h")
	bar, err2 := units.Lookup(units.Pressure, "bar")
	if err1 != nil || err2 != nil {
		return math.NaN()
	}
	return u.flowU.FromSI(m3h.ToSI(1)) / math.Sqrt(u.diffU.FromSI(bar.ToSI(1)))
}

// temperature formats a temperature in K: °C for si, °F for us.
func (u display) temperature(k float64) string {
	if u.Name == "us" {
		return fmt.Sprintf("%.1f °F", (k-273.15)*1.8+32)
	}
	return fmt.Sprintf("%.1f °C", k-273.15)
}

// head formats a pump differential with, in US units, its head in feet of
// the circulated fluid (density rho, kg/m3) beside it.
func (u display) head(p, rho float64) string {
	if u.Name != "us" || !(rho > 0) {
		return u.diff(p)
	}
	ft := p / (rho * hydraulics.StandardGravity) / 0.3048 // NIST SP 811: 1 ft = 0.3048 m exactly
	return fmt.Sprintf("%s, %.1f ft head", u.diff(p), ft)
}

// countOf writes n of a regular noun: "1 valve", "3 valves".
func countOf(n int, noun string) string {
	if n == 1 {
		return "1 " + noun
	}
	return fmt.Sprintf("%d %ss", n, noun)
}
