package hydraulics

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
)

// StandardGravity is the standard acceleration of gravity g_n in m/s2 (3rd
// CGPM 1901; NIST SP 811), used to turn pump head into pressure.
const StandardGravity = 9.80665

// PumpPoint is one point of a pump's published curve.
type PumpPoint struct {
	Flow float64 // m3/s
	Head float64 // m of the pumped liquid
}

// PumpCurve is a pump's head-flow curve at its rated speed, the quadratic
// H(q) = A0 + A1 q + A2 q² (H in m of pumped liquid, q in m3/s), with the
// flow range it was fitted over (QMin = QMax = 0 when unknown).
type PumpCurve struct {
	A0, A1, A2 float64
	QMin, QMax float64 // m3/s
}

// PoorFitFraction is the largest residual, as a fraction of shut-off head,
// that FitPump accepts before flagging the fit poor. 3 % is common practice
// (no published source): about the accuracy of a catalogue curve read by
// hand.
const PoorFitFraction = 0.03

// FitReport describes how well FitPump's quadratic matches the points.
type FitReport struct {
	RMS            float64 // root-mean-square head residual, m
	MaxRelResidual float64 // largest |residual| / shut-off head
	// Poor is set when MaxRelResidual exceeds PoorFitFraction: the curve
	// is not a quadratic over this range (or a point is misread).
	Poor bool
	// RisingAtLowFlow warns that the fitted head rises with flow at the
	// lowest data flow (a drooping curve); the pump element then uses a
	// straight line of falling head there (see Pump).
	RisingAtLowFlow bool
}

// FitPump fits H = A0 + A1 q + A2 q² to at least three curve points by least
// squares (normal equations in flow scaled to [0, 1], which keeps them well
// conditioned for three unknowns). Flows must be non-negative and strictly
// increasing and heads non-negative. A fit whose head rises with flow at the
// highest data flow is rejected: no centrifugal pump does that, so the
// points are wrong.
func FitPump(points []PumpPoint) (PumpCurve, FitReport, error) {
	if len(points) < 3 {
		return PumpCurve{}, FitReport{}, fmt.Errorf("pump fit: need at least 3 points, have %d: %w", len(points), ErrInvalid)
	}
	for i, p := range points {
		if math.IsNaN(p.Flow) || math.IsInf(p.Flow, 0) || math.IsNaN(p.Head) || math.IsInf(p.Head, 0) {
			return PumpCurve{}, FitReport{}, fmt.Errorf("pump fit: point %d (%g m3/s, %g m) is not finite: %w", i, p.Flow, p.Head, ErrInvalid)
		}
		if p.Flow < 0 || p.Head < 0 {
			return PumpCurve{}, FitReport{}, fmt.Errorf("pump fit: point %d (%g m3/s, %g m) is negative: %w", i, p.Flow, p.Head, ErrInvalid)
		}
		if i > 0 && !(p.Flow > points[i-1].Flow) {
			return PumpCurve{}, FitReport{}, fmt.Errorf("pump fit: flows must increase, point %d (%g m3/s) follows %g m3/s: %w", i, p.Flow, points[i-1].Flow, ErrInvalid)
		}
	}
	qmin, qmax := points[0].Flow, points[len(points)-1].Flow
	// Normal equations of the scaled problem in x = q/qmax.
	var m [3][4]float64
	for _, p := range points {
		x := p.Flow / qmax
		b := [3]float64{1, x, x * x}
		for i := range 3 {
			for j := range 3 {
				m[i][j] += b[i] * b[j]
			}
			m[i][3] += b[i] * p.Head
		}
	}
	c, ok := solve3(m)
	if !ok {
		return PumpCurve{}, FitReport{}, fmt.Errorf("pump fit: points do not determine a quadratic: %w", ErrInvalid)
	}
	curve := PumpCurve{A0: c[0], A1: c[1] / qmax, A2: c[2] / (qmax * qmax), QMin: qmin, QMax: qmax}
	if !(curve.A0 > 0) {
		return PumpCurve{}, FitReport{}, fmt.Errorf("pump fit: shut-off head %g m of the fit is not positive: %w", curve.A0, ErrInvalid)
	}
	if s := curve.Slope(qmax); s > 0 {
		return PumpCurve{}, FitReport{}, fmt.Errorf("pump fit: fitted head rises with flow (%.3g m per m3/s) at the highest flow %.4g m3/s: %w", s, qmax, ErrInvalid)
	}
	var rep FitReport
	var ss float64
	for _, p := range points {
		r := p.Head - curve.Head(p.Flow)
		ss += r * r
		rep.MaxRelResidual = max(rep.MaxRelResidual, math.Abs(r)/curve.A0)
	}
	rep.RMS = math.Sqrt(ss / float64(len(points)))
	rep.Poor = rep.MaxRelResidual > PoorFitFraction
	rep.RisingAtLowFlow = curve.Slope(qmin) > 0
	return curve, rep, nil
}

// solve3 solves a 3×3 system given as an augmented matrix by Gaussian
// elimination with partial pivoting.
func solve3(m [3][4]float64) ([3]float64, bool) {
	for col := range 3 {
		p := col
		for r := col + 1; r < 3; r++ {
			if math.Abs(m[r][col]) > math.Abs(m[p][col]) {
				p = r
			}
		}
		if math.Abs(m[p][col]) < 1e-12*math.Abs(m[0][0]) {
			return [3]float64{}, false
		}
		m[col], m[p] = m[p], m[col]
		for r := col + 1; r < 3; r++ {
			f := m[r][col] / m[col][col]
			for j := col; j < 4; j++ {
				m[r][j] -= f * m[col][j]
			}
		}
	}
	var x [3]float64
	for i := 2; i >= 0; i-- {
		s := m[i][3]
		for j := i + 1; j < 3; j++ {
			s -= m[i][j] * x[j]
		}
		x[i] = s / m[i][i]
	}
	return x, true
}

// Head returns the head [m] of the quadratic at flow q [m3/s], without the
// limits the Pump element applies.
func (c PumpCurve) Head(q float64) float64 { return c.A0 + (c.A1+c.A2*q)*q }

// Slope returns dH/dq [m per m3/s] of the quadratic.
func (c PumpCurve) Slope(q float64) float64 { return c.A1 + 2*c.A2*q }

// ShutOff returns the head at zero flow, m.
func (c PumpCurve) ShutOff() float64 { return c.A0 }

// MaxFlow returns the flow at which the quadratic's head falls to zero (the
// run-out end extrapolated), or an error when the curve never reaches zero
// at positive flow.
func (c PumpCurve) MaxFlow() (float64, error) {
	if !(c.A0 > 0) {
		return 0, fmt.Errorf("pump curve: shut-off head %g m is not positive: %w", c.A0, ErrInvalid)
	}
	var q float64
	switch {
	case c.A2 == 0:
		if c.A1 >= 0 {
			return 0, fmt.Errorf("pump curve: head never falls to zero: %w", ErrOutOfRange)
		}
		q = -c.A0 / c.A1
	default:
		disc := c.A1*c.A1 - 4*c.A2*c.A0
		if disc < 0 {
			return 0, fmt.Errorf("pump curve: head never falls to zero: %w", ErrOutOfRange)
		}
		// The smallest positive root is the run-out end.
		sq := math.Sqrt(disc)
		r1 := (-c.A1 - sq) / (2 * c.A2)
		r2 := (-c.A1 + sq) / (2 * c.A2)
		q = math.Inf(1)
		for _, r := range []float64{r1, r2} {
			if r > 0 && r < q {
				q = r
			}
		}
		if math.IsInf(q, 1) {
			return 0, fmt.Errorf("pump curve: head never falls to zero at positive flow: %w", ErrOutOfRange)
		}
	}
	return q, nil
}

// AtSpeed returns the curve at ratio = N/N_rated of the rated speed by the
// affinity laws (Q ∝ N, H ∝ N²): H_N(q) = ratio² H(q/ratio).
func (c PumpCurve) AtSpeed(ratio float64) PumpCurve {
	return PumpCurve{
		A0: c.A0 * ratio * ratio, A1: c.A1 * ratio, A2: c.A2,
		QMin: c.QMin * ratio, QMax: c.QMax * ratio,
	}
}

// SlopeFloorFraction sets the Pump element's slope floor: the head must
// fall by at least this fraction of the shut-off head per reference flow
// (QMax, or MaxFlow when QMax is 0). 1 % is a numerical choice, small beside
// any real curve's slope at its duty point, that keeps the network Jacobian
// positive on flat or drooping parts of a curve.
const SlopeFloorFraction = 0.01

// Validate reports whether the curve can serve as a pump element.
func (c PumpCurve) Validate() error {
	for _, v := range []float64{c.A0, c.A1, c.A2, c.QMin, c.QMax} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("pump curve: coefficient or range %g is not finite: %w", v, ErrInvalid)
		}
	}
	if !(c.A0 > 0) {
		return fmt.Errorf("pump curve: shut-off head %g m must be positive: %w", c.A0, ErrInvalid)
	}
	if c.QMin < 0 || c.QMax < c.QMin {
		return fmt.Errorf("pump curve: flow range [%g, %g] m3/s is not valid: %w", c.QMin, c.QMax, ErrInvalid)
	}
	if _, err := c.slopeFloor(); err != nil {
		return err
	}
	if _, _, ok := c.falling(); !ok {
		return fmt.Errorf("pump curve: head does not fall with flow anywhere at positive flow: %w", ErrInvalid)
	}
	return nil
}

// slopeFloor returns the smallest head fall per flow the pump element uses.
func (c PumpCurve) slopeFloor() (float64, error) {
	qref := c.QMax
	if qref == 0 {
		q, err := c.MaxFlow()
		if err != nil {
			return 0, fmt.Errorf("pump curve: no flow range and no run-out flow to scale the slope floor: %w", ErrInvalid)
		}
		qref = q
	}
	return SlopeFloorFraction * c.A0 / qref, nil
}

// falling returns the flow interval [lo, hi] within q >= 0 where the curve
// falls at least as steeply as the slope floor (H' <= -floor); hi may be
// +Inf. ok is false when there is none.
func (c PumpCurve) falling() (lo, hi float64, ok bool) {
	floor, err := c.slopeFloor()
	if err != nil {
		return 0, 0, false
	}
	// H'(q) = A1 + 2 A2 q = -floor at qs.
	switch {
	case c.A2 < 0:
		qs := (-floor - c.A1) / (2 * c.A2)
		return max(qs, 0), math.Inf(1), true
	case c.A2 > 0:
		qs := (-floor - c.A1) / (2 * c.A2)
		return 0, qs, qs >= 0
	default:
		return 0, math.Inf(1), c.A1 <= -floor
	}
}

// headLimited returns the head and slope the Pump element uses: the
// quadratic where it falls at least as steeply as the slope floor, and
// outside that interval (reverse flow, a drooping part near shut-off, a
// convex curve beyond its trough) the tangent line at the interval's end, so
// head and slope stay continuous and the slope is always at most -floor.
// Beyond run-out the quadratic continues, head turns negative and the pump
// acts as a resistance, as a real pump driven past run-out does.
func (c PumpCurve) headLimited(q float64) (h, dh float64) {
	lo, hi, ok := c.falling()
	if !ok {
		// Validate rejects this curve; keep Drop finite anyway with a line
		// from the shut-off head at the floor slope.
		floor, err := c.slopeFloor()
		if err != nil || floor == 0 {
			return math.NaN(), math.NaN()
		}
		return c.A0 - floor*q, -floor
	}
	switch {
	case q < lo:
		return c.Head(lo) + c.Slope(lo)*(q-lo), c.Slope(lo)
	case q > hi:
		return c.Head(hi) + c.Slope(hi)*(q-hi), c.Slope(hi)
	}
	return c.Head(q), c.Slope(q)
}

// Pump is a centrifugal pump running at Speed times the speed of its Curve
// (by the affinity laws). As an Element its drop is the negative of its
// pressure rise: dp = -ρ g H(q). Speed 0 means 1 (rated speed) so the zero
// value runs at the curve's speed; a stopped pump is not modelled by a
// speed of 0 but by removing or closing its branch.
//
// Drop is not odd: reverse flow through a running pump meets a head above
// shut-off, extrapolated linearly.
type Pump struct {
	Curve PumpCurve
	Speed float64 // N/N_curve; 0 means 1
}

func (p Pump) speed() float64 {
	if p.Speed == 0 {
		return 1
	}
	return p.Speed
}

// Validate reports whether the pump's curve and speed are usable.
func (p Pump) Validate() error {
	if !(p.Speed >= 0) || math.IsInf(p.Speed, 1) {
		return fmt.Errorf("pump: speed ratio %g must be positive: %w", p.Speed, ErrInvalid)
	}
	return p.Curve.AtSpeed(p.speed()).Validate()
}

// Drop implements Element: dp = -ρ g H(q) with the head of the curve at
// speed, limited as described for headLimited so d(dp)/dq stays positive.
func (p Pump) Drop(q float64, f fluid.State) (dp, slope float64) {
	h, dh := p.Curve.AtSpeed(p.speed()).headLimited(q)
	rg := f.Density * StandardGravity
	return -rg * h, -rg * dh
}

// HydraulicPower returns the power q·dp [W] given to (or taken from) the
// liquid by a flow q [m3/s] through a pressure difference dp [Pa].
func HydraulicPower(q, dp float64) float64 { return q * dp }

// ShaftPower returns the power [W] a pump's shaft needs to raise flow q
// [m3/s] by dp [Pa] at efficiency in (0, 1].
func ShaftPower(q, dp, efficiency float64) (float64, error) {
	if !(efficiency > 0 && efficiency <= 1) {
		return 0, fmt.Errorf("shaft power: efficiency %g outside (0, 1]: %w", efficiency, ErrOutOfRange)
	}
	return q * dp / efficiency, nil
}

// TrimDiameterRatio returns the impeller diameter ratio D2/D1 <= 1 for which
// the curve, scaled by the affinity laws for diameter (Q ∝ D, H ∝ D²),
// passes through the duty point (q [m3/s], h [m]): the positive root of A0
// d² + A1 q d + A2 q² = h. The diameter affinity laws are an approximation
// (the impeller's geometry changes as it is cut); they are typically within
// a few per cent for trims of up to about 10 %, and predict too small a cut
// beyond that, so trim in steps and re-test.
func TrimDiameterRatio(c PumpCurve, q, h float64) (float64, error) {
	if !(q >= 0) || !(h > 0) || math.IsInf(q, 1) || math.IsInf(h, 1) {
		return 0, fmt.Errorf("impeller trim: duty point (%g m3/s, %g m) must have positive head and non-negative flow: %w", q, h, ErrInvalid)
	}
	if !(c.A0 > 0) {
		return 0, fmt.Errorf("impeller trim: shut-off head %g m must be positive: %w", c.A0, ErrInvalid)
	}
	b := c.A1 * q
	cc := c.A2*q*q - h
	disc := b*b - 4*c.A0*cc
	if disc < 0 {
		return 0, fmt.Errorf("impeller trim: no trimmed curve passes through (%g m3/s, %g m): %w", q, h, ErrOutOfRange)
	}
	d := (-b + math.Sqrt(disc)) / (2 * c.A0)
	if !(d > 0) {
		return 0, fmt.Errorf("impeller trim: no trimmed curve passes through (%g m3/s, %g m): %w", q, h, ErrOutOfRange)
	}
	if d > 1 {
		return 0, fmt.Errorf("impeller trim: duty point (%g m3/s, %g m) lies above the full-diameter curve (ratio %.4f): %w", q, h, d, ErrOutOfRange)
	}
	return d, nil
}

// ControllerDroop is the relative rise of the flow a DiffController
// passes when it throttles a drop equal to its set point (see
// DiffController; a numerical choice, no source).
const ControllerDroop = 1e-4

// ControlDroop is the fall of a ControlledPump's held differential across
// its curve's flow range, as a fraction of the set point: 0.1 %, far below
// what a differential gauge resolves (±1 % of reading at best), but a
// non-zero slope keeps the network Jacobian definite where the drive holds
// the differential flat (a numerical choice, no source).
const ControlDroop = 1e-3

// ControlledPump is a variable-speed pump whose drive holds the differential
// SetPoint across it while it can and runs at MaxSpeed on its curve when it
// cannot: its pressure rise is min(SetPoint, ρ g H_max(q)), H_max the curve
// at MaxSpeed by the affinity laws (with the slope limits of Pump). The
// differential sensor is taken to sit across the pump.
//
// Set, when it has members, is a set of pumps the drives run together
// (their speed ratio the set's) in place of Curve: the set's combined
// curve at MaxSpeed bounds the pressure rise.
type ControlledPump struct {
	Curve    PumpCurve // at rated speed
	MaxSpeed float64   // N/N_curve the drive allows; 0 means 1
	SetPoint float64   // Pa
	Set      PumpSet
}

// flatOut returns the pump (or set) at its maximum speed.
func (p ControlledPump) flatOut() Element {
	if len(p.Set.Members) > 0 {
		return p.Set.AtSpeed(p.maxSpeed())
	}
	return Pump{Curve: p.Curve, Speed: p.maxSpeed()}
}

func (p ControlledPump) maxSpeed() float64 {
	if p.MaxSpeed == 0 {
		return 1
	}
	return p.MaxSpeed
}

// Validate reports whether the pump can serve as an element.
func (p ControlledPump) Validate() error {
	if !(p.SetPoint > 0) || math.IsInf(p.SetPoint, 1) {
		return fmt.Errorf("controlled pump: set point %g Pa must be positive: %w", p.SetPoint, ErrInvalid)
	}
	if len(p.Set.Members) > 0 {
		return p.Set.AtSpeed(p.maxSpeed()).Validate()
	}
	return Pump{Curve: p.Curve, Speed: p.maxSpeed()}.Validate()
}

// droopSlope is the held differential's fall per flow, Pa s/m3.
func (p ControlledPump) droopSlope() float64 {
	if len(p.Set.Members) > 0 {
		if qref := p.Set.AtSpeed(p.maxSpeed()).RefFlow(); qref > 0 {
			return ControlDroop * p.SetPoint / qref
		}
		return 0
	}
	c := p.Curve.AtSpeed(p.maxSpeed())
	qref := c.QMax
	if !(qref > 0) {
		if q, err := c.MaxFlow(); err == nil && q > 0 {
			qref = q
		}
	}
	if !(qref > 0) {
		return 0
	}
	return ControlDroop * p.SetPoint / qref
}

// Drop implements Element: the negative of the pressure rise.
func (p ControlledPump) Drop(q float64, f fluid.State) (dp, slope float64) {
	mx, mxSlope := p.flatOut().Drop(q, f)
	s := p.droopSlope()
	held := -p.SetPoint + s*q
	if mx > held {
		return mx, mxSlope
	}
	return held, s
}

// Most returns the pressure rise the pump gives at flow q at its maximum
// speed, Pa: the highest set point it can hold there.
func (p ControlledPump) Most(q float64, f fluid.State) float64 {
	mx, _ := p.flatOut().Drop(q, f)
	return -mx
}

// Saturated reports whether at flow q the drive runs flat out (the pump
// cannot give the set point).
func (p ControlledPump) Saturated(q float64, f fluid.State) bool {
	mx, _ := p.flatOut().Drop(q, f)
	return mx > -p.SetPoint+p.droopSlope()*q
}

// SpeedFor returns the speed ratio at which curve c gives pressure rise dp
// [Pa] at flow q [m3/s] by the affinity laws: the positive root s of
// A0 s² + A1 q s + A2 q² = dp/(ρ g). It returns NaN where no positive speed
// gives it.
func SpeedFor(c PumpCurve, q, dp float64, f fluid.State) float64 {
	h := dp / (f.Density * StandardGravity)
	a, b, cc := c.A0, c.A1*q, c.A2*q*q-h
	if !(a > 0) {
		return math.NaN()
	}
	d := b*b - 4*a*cc
	if d < 0 {
		return math.NaN()
	}
	// The larger root, written to avoid cancellation when b > 0.
	var s float64
	if b <= 0 {
		s = (-b + math.Sqrt(d)) / (2 * a)
	} else {
		s = -2 * cc / (b + math.Sqrt(d))
	}
	if !(s > 0) {
		return math.NaN()
	}
	return s
}
