package hydraulics

import (
	"fmt"
	"math"
	"reflect"
	"slices"
	"sort"

	"flowset/internal/fluid"
)

// Characteristic is a valve's flow coefficient as a function of its setting,
// in the valve's own units (handwheel turns, % travel, steps, relative travel
// in [0, 1]).
type Characteristic interface {
	// KvAt returns the flow coefficient [m3/h at 1 bar] at a setting, or an
	// error wrapping ErrOutOfRange outside Range.
	KvAt(setting float64) (float64, error)
	// SettingFor returns the lowest setting giving flow coefficient kv, or
	// an error wrapping ErrOutOfRange when kv cannot be reached.
	SettingFor(kv float64) (float64, error)
	// Range returns the lowest and highest settings.
	Range() (min, max float64)
	// Resolution returns the smallest step the setting can be moved by, or
	// 0 for a continuous setting.
	Resolution() float64
}

// RoundDir says which way Table.Round moves a setting.
type RoundDir int

// Rounding directions.
const (
	RoundNearest RoundDir = iota
	RoundDown
	RoundUp
)

// Table is a measured Kv-versus-setting table, as printed for a balancing
// valve's handwheel, in the valve's own setting units.
//
// Between points Kv is interpolated by a monotone piecewise-cubic Hermite
// interpolant (Fritsch & Butland, SIAM J. Sci. Stat. Comput. 5 (1984)
// 300-304, the local form of Fritsch & Carlson, SIAM J. Numer. Anal. 17
// (1980) 238-246) of ln Kv against setting. ln Kv, because real handwheel
// tables are strongly convex near closed and roughly exponential, so
// interpolating Kv linearly overestimates it near closed; the monotone cubic,
// because it never overshoots (so SettingFor has a unique answer) and has a
// continuous slope for the balancing and calibration solvers.
//
// A Table written as a literal works out ln Kv and the node slopes, and
// validates itself, on every call. NewTable does that once; its result gives
// the same values faster.
type Table struct {
	Settings []float64 // strictly increasing
	Kv       []float64 // m3/h at 1 bar, positive and non-decreasing
	Step     float64   // handwheel resolution in setting units; 0 = continuous

	pre *tablePre // set by NewTable
}

// tablePre is what NewTable works out once, with the slices and step it was
// worked out for: a copy of the Table given other slices or another step
// falls back to computing on each call.
type tablePre struct {
	settings, kv *float64 // first elements of Settings and Kv
	n            int
	step         float64
	lnKv, slope  []float64 // ln Kv and the interpolant's slope at each point
}

// NewTable returns a validated table of copies of settings and kv, with ln
// Kv and the slopes of the interpolant at the points worked out once. Its
// methods give the same values as those of the literal Table{settings, kv,
// step}, without the per-call validation and logarithms. The elements of the
// returned table's slices must not be modified (assigning new slices or a
// new Step is noticed and falls back to the literal's behaviour).
func NewTable(settings, kv []float64, step float64) (Table, error) {
	t := Table{Settings: slices.Clone(settings), Kv: slices.Clone(kv), Step: step}
	if err := t.Validate(); err != nil {
		return Table{}, err
	}
	n := len(t.Settings)
	pre := &tablePre{settings: &t.Settings[0], kv: &t.Kv[0], n: n, step: step, lnKv: make([]float64, n), slope: make([]float64, n)}
	for i, v := range t.Kv {
		pre.lnKv[i] = math.Log(v)
	}
	for i := range n {
		pre.slope[i] = t.nodeSlope(i)
	}
	t.pre = pre
	return t, nil
}

// prepared returns the precomputed values when they still describe t.
func (t Table) prepared() *tablePre {
	p := t.pre
	if p == nil || len(t.Settings) != p.n || len(t.Kv) != p.n || &t.Settings[0] != p.settings || &t.Kv[0] != p.kv || t.Step != p.step {
		return nil
	}
	return p
}

// Validate reports whether the table can be interpolated.
func (t Table) Validate() error {
	n := len(t.Settings)
	if n < 2 || len(t.Kv) != n {
		return fmt.Errorf("valve table: need at least 2 settings with one kv each, have %d settings and %d kv: %w", n, len(t.Kv), ErrInvalid)
	}
	for i := range n {
		s, kv := t.Settings[i], t.Kv[i]
		if math.IsNaN(s) || math.IsInf(s, 0) {
			return fmt.Errorf("valve table: setting %d is %g: %w", i, s, ErrInvalid)
		}
		if !(kv > 0) || math.IsInf(kv, 1) {
			return fmt.Errorf("valve table: kv %g at setting %g must be positive: %w", kv, s, ErrInvalid)
		}
		if i > 0 && !(s > t.Settings[i-1]) {
			return fmt.Errorf("valve table: settings must increase, %g follows %g: %w", s, t.Settings[i-1], ErrInvalid)
		}
		if i > 0 && kv < t.Kv[i-1] {
			return fmt.Errorf("valve table: kv must not decrease, %g at setting %g follows %g: %w", kv, s, t.Kv[i-1], ErrInvalid)
		}
	}
	if !(t.Step >= 0) || math.IsInf(t.Step, 1) {
		return fmt.Errorf("valve table: step %g must be non-negative: %w", t.Step, ErrInvalid)
	}
	return nil
}

// Range implements Characteristic.
func (t Table) Range() (min, max float64) {
	if len(t.Settings) == 0 {
		return 0, 0
	}
	return t.Settings[0], t.Settings[len(t.Settings)-1]
}

// Resolution implements Characteristic.
func (t Table) Resolution() float64 { return t.Step }

// KvAt implements Characteristic.
func (t Table) KvAt(setting float64) (float64, error) {
	kv, _, err := t.KvSlope(setting)
	return kv, err
}

// KvSlope returns Kv at setting and its derivative dKv/dsetting.
func (t Table) KvSlope(setting float64) (kv, slope float64, err error) {
	if t.prepared() == nil {
		if err := t.Validate(); err != nil {
			return 0, 0, err
		}
	}
	lo, hi := t.Range()
	if !(setting >= lo && setting <= hi) {
		return 0, 0, fmt.Errorf("valve table: setting %g outside [%g, %g]: %w", setting, lo, hi, ErrOutOfRange)
	}
	k := t.segment(setting)
	y, dy := t.eval(k, setting)
	kv = math.Exp(y)
	return kv, kv * dy, nil
}

// segment returns k such that Settings[k] <= s <= Settings[k+1].
func (t Table) segment(s float64) int {
	k := sort.SearchFloat64s(t.Settings, s) - 1 // Settings[k] < s <= Settings[k+1]
	return min(max(k, 0), len(t.Settings)-2)
}

// secant returns the slope of ln Kv over segment k.
func (t Table) secant(k int) float64 {
	return (math.Log(t.Kv[k+1]) - math.Log(t.Kv[k])) / (t.Settings[k+1] - t.Settings[k])
}

// nodeSlope returns the Fritsch-Butland slope of ln Kv at point k: the
// weighted harmonic mean of the neighbouring secants, zero where one is
// zero, and the shape-preserving three-point end formula at the ends.
func (t Table) nodeSlope(k int) float64 {
	n := len(t.Settings)
	if n == 2 {
		return t.secant(0)
	}
	h := func(i int) float64 { return t.Settings[i+1] - t.Settings[i] }
	if k == 0 || k == n-1 {
		// One-sided three-point formula (Moler, Numerical Computing with
		// MATLAB, §3.4), limited so it keeps the shape.
		i, j := 0, 1 // the end segment and its neighbour
		if k == n-1 {
			i, j = n-2, n-3
		}
		d0, d1 := t.secant(i), t.secant(j)
		h0, h1 := h(i), h(j)
		m := ((2*h0+h1)*d0 - h0*d1) / (h0 + h1)
		switch {
		case m*d0 <= 0:
			m = 0
		case d0*d1 <= 0 && math.Abs(m) > 3*math.Abs(d0):
			m = 3 * d0
		}
		return m
	}
	d0, d1 := t.secant(k-1), t.secant(k)
	if d0 == 0 || d1 == 0 {
		return 0
	}
	h0, h1 := h(k-1), h(k)
	w1, w2 := 2*h1+h0, h1+2*h0
	return (w1 + w2) / (w1/d0 + w2/d1)
}

// eval returns ln Kv and d(ln Kv)/ds at s on segment k.
func (t Table) eval(k int, s float64) (y, dy float64) {
	var y0, y1, m0, m1 float64
	if p := t.prepared(); p != nil {
		y0, y1, m0, m1 = p.lnKv[k], p.lnKv[k+1], p.slope[k], p.slope[k+1]
	} else {
		y0, y1 = math.Log(t.Kv[k]), math.Log(t.Kv[k+1])
		m0, m1 = t.nodeSlope(k), t.nodeSlope(k+1)
	}
	x0, x1 := t.Settings[k], t.Settings[k+1]
	h := x1 - x0
	u := (s - x0) / h
	u2, u3 := u*u, u*u*u
	y = (2*u3-3*u2+1)*y0 + (u3-2*u2+u)*h*m0 + (-2*u3+3*u2)*y1 + (u3-u2)*h*m1
	dy = ((6*u2-6*u)*y0+(-6*u2+6*u)*y1)/h + (3*u2-4*u+1)*m0 + (3*u2-2*u)*m1
	return y, dy
}

// SettingFor implements Characteristic: the lowest setting whose interpolated
// Kv equals kv, found by bisection on the monotone interpolant.
func (t Table) SettingFor(kv float64) (float64, error) {
	if t.prepared() == nil {
		if err := t.Validate(); err != nil {
			return 0, err
		}
	}
	n := len(t.Kv)
	if !(kv >= t.Kv[0] && kv <= t.Kv[n-1]) {
		return 0, fmt.Errorf("valve table: kv %g outside [%g, %g]: %w", kv, t.Kv[0], t.Kv[n-1], ErrOutOfRange)
	}
	j := sort.SearchFloat64s(t.Kv, kv) // first point with Kv >= kv
	if t.Kv[j] == kv {
		return t.Settings[j], nil
	}
	k := j - 1
	target := math.Log(kv)
	lo, hi := t.Settings[k], t.Settings[k+1]
	// The interval's Hermite coefficients, found once: the bisection
	// takes about fifty steps, and eval would look them up (or take
	// logarithms) and work out the slope at every one. lnKvAt is eval's
	// y, the same expression, so the same bits.
	var y0, y1, m0, m1 float64
	if p := t.prepared(); p != nil {
		y0, y1, m0, m1 = p.lnKv[k], p.lnKv[k+1], p.slope[k], p.slope[k+1]
	} else {
		y0, y1 = math.Log(t.Kv[k]), math.Log(t.Kv[k+1])
		m0, m1 = t.nodeSlope(k), t.nodeSlope(k+1)
	}
	x0, h := t.Settings[k], t.Settings[k+1]-t.Settings[k]
	lnKvAt := func(s float64) float64 {
		u := (s - x0) / h
		u2, u3 := u*u, u*u*u
		return (2*u3-3*u2+1)*y0 + (u3-2*u2+u)*h*m0 + (-2*u3+3*u2)*y1 + (u3-u2)*h*m1
	}
	for range 200 {
		mid := lo + (hi-lo)/2
		if mid <= lo || mid >= hi {
			break
		}
		if y := lnKvAt(mid); y < target {
			lo = mid
		} else {
			hi = mid
		}
	}
	return hi, nil
}

// Round moves a setting to the handwheel's resolution, counting steps from
// the lowest setting, in direction dir, and keeps it inside the table.
// Settings within 1e-9 step of a mark count as on it. With Step 0 the
// setting is returned unchanged.
func (t Table) Round(setting float64, dir RoundDir) (float64, error) {
	if t.prepared() == nil {
		if err := t.Validate(); err != nil {
			return 0, err
		}
	}
	lo, hi := t.Range()
	if !(setting >= lo && setting <= hi) {
		return 0, fmt.Errorf("valve table: setting %g outside [%g, %g]: %w", setting, lo, hi, ErrOutOfRange)
	}
	if t.Step == 0 {
		return setting, nil
	}
	const eps = 1e-9
	x := (setting - lo) / t.Step
	var k float64
	switch dir {
	case RoundDown:
		k = math.Floor(x + eps)
	case RoundUp:
		k = math.Ceil(x - eps)
	default:
		k = math.Round(x)
	}
	return min(max(lo+k*t.Step, lo), hi), nil
}

// Kind is the shape of a valve's inherent characteristic.
type Kind int

// Inherent characteristic kinds (IEC 60534-1 terms).
const (
	Linear Kind = iota
	EqualPercentage
	QuickOpening
)

// String returns the kind's name.
func (k Kind) String() string {
	switch k {
	case Linear:
		return "linear"
	case EqualPercentage:
		return "equal-percentage"
	case QuickOpening:
		return "quick-opening"
	}
	return fmt.Sprintf("Kind(%d)", int(k))
}

// Inherent is an idealised inherent characteristic of a control valve,
// relative flow coefficient φ = Kv/Kvs against relative travel h in [0, 1]
// (the setting), with inherent rangeability R = φ(1)/φ(0):
//
//   - linear: φ = 1/R + (1 - 1/R) h (a straight line from the leakage-like
//     floor 1/R at closed to 1 at full travel);
//   - equal-percentage: φ = R^(h-1), the exponential form of IEC 60534-2-4
//     and textbooks (a given travel step changes Kv by a fixed percentage);
//   - quick-opening: φ = 1/R + (1 - 1/R) √h. There is no standard formula
//     for quick-opening; √h is a common idealisation, given the same 1/R
//     floor as linear. Prefer a measured Table for a real valve.
type Inherent struct {
	Kind         Kind
	Kvs          float64 // Kv at full travel, m3/h at 1 bar
	Rangeability float64 // R > 1, typically 25-50 for globe valves
}

// Validate reports whether Kvs and the rangeability make sense.
func (c Inherent) Validate() error {
	if c.Kind < Linear || c.Kind > QuickOpening {
		return fmt.Errorf("inherent characteristic: unknown kind %d: %w", int(c.Kind), ErrInvalid)
	}
	if !(c.Kvs > 0) || math.IsInf(c.Kvs, 1) {
		return fmt.Errorf("inherent characteristic: kvs %g must be positive: %w", c.Kvs, ErrInvalid)
	}
	if !(c.Rangeability > 1) || math.IsInf(c.Rangeability, 1) {
		return fmt.Errorf("inherent characteristic: rangeability %g must exceed 1: %w", c.Rangeability, ErrInvalid)
	}
	return nil
}

// Range implements Characteristic: relative travel from 0 to 1.
func (c Inherent) Range() (min, max float64) { return 0, 1 }

// Resolution implements Characteristic: the travel is continuous.
func (c Inherent) Resolution() float64 { return 0 }

// KvAt implements Characteristic.
func (c Inherent) KvAt(h float64) (float64, error) {
	kv, _, err := c.KvSlope(h)
	return kv, err
}

// KvSlope returns Kv at relative travel h and dKv/dh. At h = 0 the
// quick-opening slope is infinite and is reported as the largest float64.
func (c Inherent) KvSlope(h float64) (kv, slope float64, err error) {
	if err := c.Validate(); err != nil {
		return 0, 0, err
	}
	if !(h >= 0 && h <= 1) {
		return 0, 0, fmt.Errorf("inherent characteristic: travel %g outside [0, 1]: %w", h, ErrOutOfRange)
	}
	r := c.Rangeability
	var phi, dphi float64
	switch c.Kind {
	case Linear:
		phi, dphi = 1/r+(1-1/r)*h, 1-1/r
	case EqualPercentage:
		phi = math.Pow(r, h-1)
		dphi = phi * math.Log(r)
	case QuickOpening:
		sq := math.Sqrt(h)
		phi = 1/r + (1-1/r)*sq
		dphi = math.MaxFloat64
		if sq > 0 {
			dphi = (1 - 1/r) / (2 * sq)
		}
	}
	return c.Kvs * phi, c.Kvs * dphi, nil
}

// SettingFor implements Characteristic by inverting φ(h) in closed form.
func (c Inherent) SettingFor(kv float64) (float64, error) {
	if err := c.Validate(); err != nil {
		return 0, err
	}
	r := c.Rangeability
	lo := c.Kvs / r
	if !(kv >= lo && kv <= c.Kvs) {
		return 0, fmt.Errorf("inherent characteristic: kv %g outside [%g, %g]: %w", kv, lo, c.Kvs, ErrOutOfRange)
	}
	phi := kv / c.Kvs
	var h float64
	switch c.Kind {
	case Linear:
		h = (phi - 1/r) / (1 - 1/r)
	case EqualPercentage:
		h = 1 + math.Log(phi)/math.Log(r)
	case QuickOpening:
		s := (phi - 1/r) / (1 - 1/r)
		h = s * s
	}
	return min(max(h, 0), 1), nil
}

// LeakageFraction is the Kv of a closed valve as a fraction of its Kv at the
// top of its range. 1e-4 is the seat leakage of IEC 60534-4 / ANSI/FCI 70-2
// class IV (0.01 % of rated capacity); it keeps a closed valve's resistance
// finite so the network equations stay solvable.
const LeakageFraction = 1e-4

// Valve is a balancing or control valve at a fixed setting. Its drop follows
// KvDrop with Kv = Char.KvAt(Setting) × KvScale, but never below the leakage
// Kv (LeakageFraction of Kv at the top of the range, × KvScale).
//
// A Valve written as a literal asks its characteristic for both flow
// coefficients on every Drop; NewValve asks once.
type Valve struct {
	Char    Characteristic
	Setting float64
	// KvScale multiplies the characteristic's Kv; the calibration fits it
	// as the valve's Kv offset. 0 means 1 so the zero value is a nominal
	// valve.
	KvScale float64

	memo valveMemo // set by NewValve
}

// valveMemo holds the flow coefficients NewValve worked out and what they
// were worked out from, so a copy with another Char, Setting or KvScale is
// noticed and computes afresh.
type valveMemo struct {
	char           Characteristic
	setting, scale float64
	kv, leak       float64 // Kv() and LeakageKv(); 0 when not worked out
}

// NewValve returns the valve of characteristic c at a setting and Kv scale
// (0 means 1) with its flow coefficient and leakage Kv worked out once, so
// Drop costs no more than FixedKv's. It gives the same values as the literal
// Valve{Char: c, Setting: setting, KvScale: kvScale}, which it also returns,
// without the memo, when Validate fails (its Drop then returns NaN).
//
// The memo is keyed on Char, Setting and KvScale: changing any of them on
// a copy is safe. A characteristic must not change its values in place
// (a Table's slice elements, a pointer's target) after NewValve.
func NewValve(c Characteristic, setting, kvScale float64) (Valve, error) {
	v := Valve{Char: c, Setting: setting, KvScale: kvScale}
	if err := v.Validate(); err != nil {
		return v, err
	}
	kv, err := v.Kv()
	if err != nil {
		return v, err
	}
	leak, err := v.LeakageKv()
	if err != nil {
		return v, err
	}
	v.memo = valveMemo{char: c, setting: setting, scale: kvScale, kv: kv, leak: leak}
	return v, nil
}

// memoized returns the valve's memo when it still describes the valve.
func (v *Valve) memoized() *valveMemo {
	m := &v.memo
	if m.kv > 0 && m.setting == v.Setting && m.scale == v.KvScale && sameChar(m.char, v.Char) {
		return m
	}
	return nil
}

// sameChar reports whether a and b are the same characteristic without
// comparing values Go cannot compare: tables by their slices and step,
// other comparable types by ==, anything else as different.
func sameChar(a, b Characteristic) bool {
	if ta, ok := a.(Table); ok {
		tb, ok := b.(Table)
		return ok && ta.Step == tb.Step && sameSlice(ta.Settings, tb.Settings) && sameSlice(ta.Kv, tb.Kv)
	}
	if a == nil || !reflect.TypeOf(a).Comparable() {
		return false
	}
	return a == b
}

// sameSlice reports whether x and y are the same slice of one array.
func sameSlice(x, y []float64) bool {
	return len(x) == len(y) && (len(x) == 0 || &x[0] == &y[0])
}

func (v Valve) scale() float64 {
	if v.KvScale == 0 {
		return 1
	}
	return v.KvScale
}

// Validate reports whether the valve has a valid characteristic, setting
// and scale.
func (v Valve) Validate() error {
	if v.Char == nil {
		return fmt.Errorf("valve: no characteristic: %w", ErrInvalid)
	}
	if s := v.KvScale; !(s >= 0) || math.IsInf(s, 1) {
		return fmt.Errorf("valve: kv scale %g must be positive: %w", s, ErrInvalid)
	}
	_, err := v.Kv()
	return err
}

// Kv returns the valve's effective flow coefficient Char.KvAt(Setting) ×
// KvScale, without the leakage floor.
func (v Valve) Kv() (float64, error) {
	if m := v.memoized(); m != nil {
		return m.kv, nil
	}
	if v.Char == nil {
		return 0, fmt.Errorf("valve: no characteristic: %w", ErrInvalid)
	}
	kv, err := v.Char.KvAt(v.Setting)
	if err != nil {
		return 0, fmt.Errorf("valve: %w", err)
	}
	return kv * v.scale(), nil
}

// LeakageKv returns the Kv the valve passes when closed.
func (v Valve) LeakageKv() (float64, error) {
	if m := v.memoized(); m != nil {
		return m.leak, nil
	}
	if v.Char == nil {
		return 0, fmt.Errorf("valve: no characteristic: %w", ErrInvalid)
	}
	_, hi := v.Char.Range()
	kvMax, err := v.Char.KvAt(hi)
	if err != nil {
		return 0, fmt.Errorf("valve: %w", err)
	}
	return LeakageFraction * kvMax * v.scale(), nil
}

// IsClosed reports whether the valve's Kv is at or below its leakage Kv. An
// invalid valve is not reported closed; Validate tells what is wrong.
func (v Valve) IsClosed() bool {
	kv, err := v.Kv()
	if err != nil {
		return false
	}
	leak, err := v.LeakageKv()
	return err == nil && kv <= leak
}

// Drop implements Element. A valve that fails Validate returns NaN. Above
// the leakage floor dp ∝ 1/KvScale², so d(dp)/d(KvScale) = -2 dp/KvScale
// for the calibration.
func (v Valve) Drop(q float64, f fluid.State) (dp, slope float64) {
	if m := v.memoized(); m != nil {
		return KvDrop(q, max(m.kv, m.leak), f.Density)
	}
	kv, err := v.Kv()
	if err != nil {
		return math.NaN(), math.NaN()
	}
	if leak, err := v.LeakageKv(); err == nil && kv < leak {
		kv = leak
	}
	return KvDrop(q, kv, f.Density)
}

// Authority returns the valve authority N = Δp_v / (Δp_v + Δp_rest):
// dpValveOpen is the drop across the fully open valve at design flow and
// dpCircuit the drop of the rest of the circuit it controls at the same flow
// (excluding the valve), as defined in IEC 60534 guidance and the ASHRAE
// Handbook (HVAC Systems and Equipment, valves chapter).
func Authority(dpValveOpen, dpCircuit float64) (float64, error) {
	if !(dpValveOpen > 0) || math.IsInf(dpValveOpen, 1) || !(dpCircuit >= 0) || math.IsInf(dpCircuit, 1) {
		return 0, fmt.Errorf("authority: valve drop %g Pa must be positive and circuit drop %g Pa non-negative: %w", dpValveOpen, dpCircuit, ErrInvalid)
	}
	return dpValveOpen / (dpValveOpen + dpCircuit), nil
}

// InstalledFlowRatio returns q/q100, the flow through a valve at relative
// flow coefficient phi = Kv/Kvs as a fraction of its fully open flow, when
// the branch it sits in keeps a constant differential and the valve has
// authority N: q/q100 = 1/√(1 - N + N/φ²) (the textbook installed
// characteristic, from the square law in valve and circuit).
func InstalledFlowRatio(phi, authority float64) (float64, error) {
	if !(phi >= 0 && phi <= 1) {
		return 0, fmt.Errorf("installed flow ratio: relative kv %g outside [0, 1]: %w", phi, ErrOutOfRange)
	}
	if !(authority >= 0 && authority <= 1) {
		return 0, fmt.Errorf("installed flow ratio: authority %g outside [0, 1]: %w", authority, ErrOutOfRange)
	}
	if phi == 0 {
		if authority == 0 {
			return 1, nil
		}
		return 0, nil
	}
	return 1 / math.Sqrt(1-authority+authority/(phi*phi)), nil
}
