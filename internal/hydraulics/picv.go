package hydraulics

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
)

// Constants of the pressure-independent valve's regulating law (see
// PressureIndependent). Neither is a published figure: they are chosen so
// that the modelled valve is at least as good as the valves they stand for,
// whose makers state a flow held within a few per cent across their range
// (common practice, no source).
const (
	// RegulatorDroop is how much the held flow rises, as a fraction of the
	// set flow, per pascal of differential above the hold point: 0.5 % per
	// 100 kPa.
	RegulatorDroop = 0.005 / 1e5
	// regulatorKnee is the pressure scale of the rounded corner between the
	// fixed-Kv law and the regulating law, as a fraction of the hold
	// differential: the corner is spread over a few tenths of a per cent of
	// it, so the valve passes its set flow from about 0.35 % above its hold
	// differential.
	regulatorKnee = 0.005
)

// PressureIndependent is a pressure-independent control valve at one
// setting: a flow limiter and a differential regulator in one body. Above its
// hold differential the regulator closes to keep the flow at the set flow
// whatever the differential; below it the regulator is wide open and the
// valve is a fixed restriction of flow coefficient Kv, so the flow falls as
// the square root of the differential (IEC 60534-2-1, as KvDrop).
//
// The hold differential is where the two meet: KvDrop(Flow, Kv, ρ). A valve
// whose Kv comes from its least differential and set flow (KvFromDrop at the
// reference density) holds its flow from exactly that least differential.
//
// # The law as a drop
//
// The network solver needs the drop as a function of flow with a finite,
// non-negative slope. An ideal regulator is a vertical line at the set flow,
// which no Newton method can use; it is modelled instead as a stiff variable
// resistance added to the fixed Kv:
//
//	dp(q) = c q|q| + P [sp((q - Q)/w) - sp((-q - Q)/w)],  sp(x) = ln(1 + e^x),
//
// with c the Kv law's coefficient, Q the set flow, P = regulatorKnee × the
// hold differential and w = RegulatorDroop × Q × P. Far above the set flow
// the added term is P (q - Q)/w, a straight line whose slope 1/(Q ×
// RegulatorDroop) lets the flow rise by RegulatorDroop × Q per pascal (a
// proportional regulator of finite gain, as real ones are); far below it is
// zero to within e^-(Q/w). The law is smooth (every derivative exists),
// strictly increasing for q ≠ 0 and odd (reverse flow meets the body as a
// fixed Kv and a mirrored regulator), its slope is never infinite, and the
// stiffest slope is bounded by the droop, so the Jacobian of the
// Todini-Pilati iteration stays finite and non-singular where it would be
// for a plain Kv element (the solver's slope floor covers q = 0, as for
// KvDrop). A smoothed minimum of two flows, or a switch between two laws, was
// rejected: a switch has a slope jump at the corner that makes Newton's
// method cycle, and the softplus keeps the corner sharp (a few tenths of a
// per cent of the hold differential) while being analytic.
type PressureIndependent struct {
	Flow float64 // set flow, m3/s
	Kv   float64 // m3/h at 1 bar, below the hold differential
}

// Validate reports whether the set flow and Kv are positive and finite.
func (v PressureIndependent) Validate() error {
	if !(v.Flow > 0) || math.IsInf(v.Flow, 1) {
		return fmt.Errorf("pressure-independent valve: set flow %g m3/s must be positive: %w", v.Flow, ErrInvalid)
	}
	if !(v.Kv > 0) || math.IsInf(v.Kv, 1) {
		return fmt.Errorf("pressure-independent valve: kv %g must be positive: %w", v.Kv, ErrInvalid)
	}
	return nil
}

// HoldDiff returns the differential [Pa] at which the valve reaches its set
// flow with its regulator wide open, for a liquid of density rho.
func (v PressureIndependent) HoldDiff(rho float64) float64 {
	dp, _ := KvDrop(v.Flow, v.Kv, rho)
	return dp
}

// regulator returns P and w of the law for density rho.
func (v PressureIndependent) regulator(rho float64) (p, w float64) {
	p = regulatorKnee * v.HoldDiff(rho)
	return p, RegulatorDroop * v.Flow * p
}

// softplus returns ln(1 + e^x) and its derivative, the logistic function,
// without overflow.
func softplus(x float64) (y, dy float64) {
	switch {
	case x > 40:
		return x, 1
	case x < -40:
		e := math.Exp(x)
		return e, e
	}
	e := math.Exp(x)
	return math.Log1p(e), e / (1 + e)
}

// parts returns the fixed-Kv part of the drop with its slope, and the
// regulator's part with its slope.
func (v PressureIndependent) parts(q, rho float64) (kdp, kslope, rdp, rslope float64) {
	kdp, kslope = KvDrop(q, v.Kv, rho)
	p, w := v.regulator(rho)
	a, da := softplus((q - v.Flow) / w)
	b, db := softplus((-q - v.Flow) / w)
	return kdp, kslope, p * (a - b), p / w * (da + db)
}

// Drop implements Element by the law of the type comment. An invalid valve
// returns NaN.
func (v PressureIndependent) Drop(q float64, f fluid.State) (dp, slope float64) {
	if v.Validate() != nil {
		return math.NaN(), math.NaN()
	}
	kdp, ks, rdp, rs := v.parts(q, f.Density)
	return kdp + rdp, ks + rs
}

// ScaleDrop returns d(dp)/d(ln k) at flow q where k multiplies both the set
// flow and the Kv (a valve whose setting passes k times its table's flow):
// the calibration's derivative with respect to the valve's flow scale. The
// hold differential does not change with k, so P does not; w and Q scale
// with k, and the drop is then a function of q/k alone in the regulator's
// part: -q × its slope. The Kv part gives -2 × its drop, as for a Valve.
func (v PressureIndependent) ScaleDrop(q float64, f fluid.State) float64 {
	if v.Validate() != nil {
		return math.NaN()
	}
	kdp, _, _, rs := v.parts(q, f.Density)
	return -2*kdp - q*rs
}

// FlowAt returns the flow [m3/s] the valve passes at differential dp [Pa]
// (negative for reverse flow), the inverse of Drop, by Newton's method
// safeguarded by bisection on the strictly increasing law.
func (v PressureIndependent) FlowAt(dp float64, f fluid.State) (float64, error) {
	if err := v.Validate(); err != nil {
		return 0, err
	}
	if math.IsNaN(dp) || math.IsInf(dp, 0) || !(f.Density > 0) {
		return 0, fmt.Errorf("pressure-independent valve: differential %g Pa and density %g kg/m3 must be finite and the density positive: %w", dp, f.Density, ErrInvalid)
	}
	if dp == 0 {
		return 0, nil
	}
	sign := 1.0
	if dp < 0 {
		sign, dp = -1, -dp
	}
	// Bracket: the fixed Kv alone passes more than the valve at any dp.
	lo := 0.0
	hi := v.Kv / secondsPerHour * math.Sqrt(dp/pascalPerBar*KvRefDensity/f.Density) * 1.01
	q := min(hi, v.Flow)
	for range 200 {
		g, s := v.Drop(q, f)
		g -= dp
		if math.Abs(g) <= 1e-13*dp {
			return sign * q, nil
		}
		if g > 0 {
			hi = q
		} else {
			lo = q
		}
		next := q - g/s
		if !(next > lo && next < hi) || s <= 0 {
			next = (lo + hi) / 2
		}
		if next == q || hi-lo <= 1e-15*hi {
			return sign * next, nil
		}
		q = next
	}
	return sign * q, nil
}

// PressureIndependentTable is a pressure-independent valve model: the flow
// it holds and its Kv below its hold differential, each against setting
// (monotone cubic tables in ln value, as Table), and the least differential
// at which its maker says it holds its flow.
type PressureIndependentTable struct {
	Flow Table // set flow [m3/s] against setting
	Kv   Table // Kv [m3/h at 1 bar] below the hold differential against setting
	// HoldDiff is the maker's least differential for holding the flow, Pa.
	HoldDiff float64
}

// NewPressureIndependentTable returns the model of settings, the flows held
// there [m3/s], the Kv below the hold differential (NaN entries: the Kv
// that passes the setting's flow at holdDiff with water at the reference
// density, so the valve holds from exactly holdDiff) and the smallest
// setting change step.
func NewPressureIndependentTable(settings, flows, kv []float64, holdDiff, step float64) (PressureIndependentTable, error) {
	if !(holdDiff > 0) || math.IsInf(holdDiff, 1) {
		return PressureIndependentTable{}, fmt.Errorf("pressure-independent valve: hold differential %g Pa must be positive: %w", holdDiff, ErrInvalid)
	}
	if len(kv) != len(flows) {
		return PressureIndependentTable{}, fmt.Errorf("pressure-independent valve: %d kv for %d flows: %w", len(kv), len(flows), ErrInvalid)
	}
	ft, err := NewTable(settings, flows, step)
	if err != nil {
		return PressureIndependentTable{}, fmt.Errorf("pressure-independent valve, flow table: %w", err)
	}
	k := make([]float64, len(kv))
	for i, v := range kv {
		k[i] = v
		if math.IsNaN(v) {
			if k[i], err = KvFromDrop(flows[i], holdDiff, KvRefDensity); err != nil {
				return PressureIndependentTable{}, fmt.Errorf("pressure-independent valve: %w", err)
			}
		}
	}
	kt, err := NewTable(settings, k, step)
	if err != nil {
		return PressureIndependentTable{}, fmt.Errorf("pressure-independent valve, kv below the hold differential: %w", err)
	}
	return PressureIndependentTable{Flow: ft, Kv: kt, HoldDiff: holdDiff}, nil
}

// At returns the valve at a setting, with its flow and Kv multiplied by
// scale (a setting that passes scale times its table's flow; 0 means 1).
func (t PressureIndependentTable) At(setting, scale float64) (PressureIndependent, error) {
	if scale == 0 {
		scale = 1
	}
	q, err := t.Flow.KvAt(setting)
	if err != nil {
		return PressureIndependent{}, err
	}
	kv, err := t.Kv.KvAt(setting)
	if err != nil {
		return PressureIndependent{}, err
	}
	return PressureIndependent{Flow: q * scale, Kv: kv * scale}, nil
}

// Range returns the lowest and highest setting.
func (t PressureIndependentTable) Range() (lo, hi float64) { return t.Flow.Range() }

// SettingFor returns the setting whose held flow is q [m3/s].
func (t PressureIndependentTable) SettingFor(q float64) (float64, error) { return t.Flow.SettingFor(q) }
