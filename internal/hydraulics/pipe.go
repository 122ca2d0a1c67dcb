package hydraulics

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
)

// Pipe is a straight run of round pipe. Its pressure drop follows the
// Darcy-Weisbach equation dp = f (L/D) ρ v|v|/2 with the friction factor of
// FrictionFactor. Lengths are in m.
type Pipe struct {
	Bore      float64 // inside diameter, m
	Length    float64 // m
	Roughness float64 // absolute roughness ε, m
}

// Validate reports whether the pipe's dimensions make sense; Drop of a pipe
// that fails Validate returns NaN or Inf.
func (p Pipe) Validate() error {
	switch {
	case !(p.Bore > 0) || math.IsInf(p.Bore, 1):
		return fmt.Errorf("pipe: bore %g m must be positive: %w", p.Bore, ErrInvalid)
	case !(p.Length >= 0) || math.IsInf(p.Length, 1):
		return fmt.Errorf("pipe: length %g m must be non-negative: %w", p.Length, ErrInvalid)
	case !(p.Roughness >= 0) || p.Roughness/p.Bore > MaxRelRoughness:
		return fmt.Errorf("pipe: roughness %g m outside [0, %g] of the bore: %w", p.Roughness, MaxRelRoughness, ErrInvalid)
	}
	return nil
}

// Area returns the flow area in m2.
func (p Pipe) Area() float64 { return math.Pi / 4 * p.Bore * p.Bore }

// Velocity returns the mean velocity in m/s at flow q [m3/s], signed like q.
func (p Pipe) Velocity(q float64) float64 { return q / p.Area() }

// Reynolds returns the Reynolds number ρ|v|D/μ at flow q [m3/s].
func (p Pipe) Reynolds(q float64, f fluid.State) float64 {
	return f.Density * math.Abs(p.Velocity(q)) * p.Bore / f.Viscosity
}

// Drop implements Element. In laminar flow it uses the Hagen-Poiseuille form
// dp = 32 μ L v / D², which is the Darcy-Weisbach equation with f = 64/Re
// written without the division by Re, so the slope stays finite at q = 0.
// Elsewhere the slope is exact: d(f v|v|)/dv = |v| (2f + Re df/dRe).
//
// The divisions are by the pipe's and fluid's constants only, so they do not
// wait for q: Drop sits on the critical path of every network evaluation.
func (p Pipe) Drop(q float64, f fluid.State) (dp, slope float64) {
	area := p.Area()
	invA := 1 / area
	req := f.Density * p.Bore / (f.Viscosity * area) // Re per unit |q|
	v := q * invA
	re := math.Abs(q) * req
	if re <= LaminarLimit {
		c := 32 * f.Viscosity * p.Length / (p.Bore * p.Bore)
		return c * v, c * invA
	}
	ff, df := friction(re, p.Roughness/p.Bore)
	k := p.Length / p.Bore * f.Density / 2
	av := math.Abs(v)
	return k * ff * v * av, k * av * (2*ff + re*df) * invA
}

// Fitting is a lumped minor loss (bend, tee, strainer, entry and exit):
// dp = K ρ v|v|/2 with v the mean velocity in a bore of Bore metres, K
// constant (fully turbulent tables such as those of Idelchik or Crane TP-410
// give K for a reference bore).
type Fitting struct {
	K    float64 // loss coefficient, dimensionless
	Bore float64 // reference inside diameter, m
}

// Validate reports whether the fitting's parameters make sense.
func (ft Fitting) Validate() error {
	if !(ft.K >= 0) || math.IsInf(ft.K, 1) {
		return fmt.Errorf("fitting: loss coefficient %g must be non-negative: %w", ft.K, ErrInvalid)
	}
	if !(ft.Bore > 0) || math.IsInf(ft.Bore, 1) {
		return fmt.Errorf("fitting: bore %g m must be positive: %w", ft.Bore, ErrInvalid)
	}
	return nil
}

// Drop implements Element.
func (ft Fitting) Drop(q float64, f fluid.State) (dp, slope float64) {
	area := math.Pi / 4 * ft.Bore * ft.Bore
	v := q / area
	c := ft.K * f.Density / 2
	return c * v * math.Abs(v), 2 * c * math.Abs(v) / area
}

// Terminal is a coil, heat exchanger, fan-coil or other terminal unit known
// by one rated point: dp = RatedDrop (q/RatedFlow)|q/RatedFlow|, the square
// law of fully turbulent flow.
//
// The density effect is neglected: the rated drop is taken as valid for the
// liquid actually circulated. Water density varies by under 3 % across 5-90
// °C, below the accuracy of a manufacturer's rating; for glycol mixtures give
// the rated drop for the mixture.
type Terminal struct {
	RatedDrop float64 // Pa at RatedFlow
	RatedFlow float64 // m3/s
}

// Validate reports whether the rated point makes sense.
func (t Terminal) Validate() error {
	if !(t.RatedDrop > 0) || math.IsInf(t.RatedDrop, 1) {
		return fmt.Errorf("terminal: rated drop %g Pa must be positive: %w", t.RatedDrop, ErrInvalid)
	}
	if !(t.RatedFlow > 0) || math.IsInf(t.RatedFlow, 1) {
		return fmt.Errorf("terminal: rated flow %g m3/s must be positive: %w", t.RatedFlow, ErrInvalid)
	}
	return nil
}

// Drop implements Element.
func (t Terminal) Drop(q float64, _ fluid.State) (dp, slope float64) {
	r := q / t.RatedFlow
	return t.RatedDrop * r * math.Abs(r), 2 * t.RatedDrop * math.Abs(r) / t.RatedFlow
}

// Scaled multiplies another element's drop and slope by Factor. Calibration
// fits such factors as resistance multipliers (fouling, unknown fittings).
type Scaled struct {
	E      Element
	Factor float64
}

// Validate reports whether the factor is non-negative and finite and the
// wrapped element is valid (when it has a Validate method).
func (s Scaled) Validate() error {
	if s.E == nil {
		return fmt.Errorf("scaled: no element: %w", ErrInvalid)
	}
	if !(s.Factor >= 0) || math.IsInf(s.Factor, 1) {
		return fmt.Errorf("scaled: factor %g must be non-negative: %w", s.Factor, ErrInvalid)
	}
	return validate(s.E)
}

// Drop implements Element. Its derivative with respect to Factor, which
// the calibration needs, is the wrapped element's drop.
func (s Scaled) Drop(q float64, f fluid.State) (dp, slope float64) {
	dp, slope = s.E.Drop(q, f)
	return s.Factor * dp, s.Factor * slope
}

// Series is elements in series carrying the same flow; its drop and slope
// are the sums of theirs.
type Series []Element

// Validate reports whether every element that has a Validate method is
// valid, naming the first that is not by its position.
func (s Series) Validate() error {
	for i, e := range s {
		if e == nil {
			return fmt.Errorf("series: element %d is nil: %w", i, ErrInvalid)
		}
		if err := validate(e); err != nil {
			return fmt.Errorf("series: element %d: %w", i, err)
		}
	}
	return nil
}

// validate calls e's Validate method when it has one.
func validate(e Element) error {
	if v, ok := e.(interface{ Validate() error }); ok {
		return v.Validate()
	}
	return nil
}

// Drop implements Element.
func (s Series) Drop(q float64, f fluid.State) (dp, slope float64) {
	for _, e := range s {
		d, sl := e.Drop(q, f)
		dp += d
		slope += sl
	}
	return dp, slope
}
