package hydraulics

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
)

// SetMember is one running pump of a PumpSet.
type SetMember struct {
	Curve PumpCurve // at the pump's rated speed
	// Speed is the pump's own speed ratio, for a pump whose drive is set
	// apart from the rest (a fixed-speed assist pump, say); 0: the pump
	// runs at the set's speed.
	Speed float64
}

// PumpSet is the pumps that run together on one circuit: in parallel, each
// through its own non-return valve into common headers, or in series, one
// feeding the next. Each has its own curve. As an Element it is the combined
// pump, its drop the negative of the combined pressure rise.
//
// The combined curve is exact, never a fit: in parallel the flows add at
// equal head, each pump giving flow only while the common head is below its
// own head at zero flow (its non-return valve shuts above it); in series the
// heads add at equal flow. Each pump's curve carries the slope limits of
// Pump, so the combined head falls strictly with flow and the network
// Jacobian stays positive. A set of one pump is that Pump exactly.
//
// The set obeys the affinity laws in its Speed when every member follows it
// (Speed 0 on each): each member's curve scales so, and so does their sum
// at equal head or equal flow.
type PumpSet struct {
	Members []SetMember
	Series  bool
	Speed   float64 // the set's speed ratio N/N_rated; 0 means 1
}

func (s PumpSet) speed() float64 {
	if s.Speed == 0 {
		return 1
	}
	return s.Speed
}

// curve returns member i's curve at the speed it runs at.
func (s PumpSet) curve(i int) PumpCurve {
	m := s.Members[i]
	if m.Speed > 0 {
		return m.Curve.AtSpeed(m.Speed)
	}
	return m.Curve.AtSpeed(s.speed())
}

// single reports whether the set is one pump following the set's speed,
// which is a Pump exactly.
func (s PumpSet) single() bool { return len(s.Members) == 1 && s.Members[0].Speed == 0 }

// AtSpeed returns the set with its speed ratio set to r (members with their
// own speed keep it).
func (s PumpSet) AtSpeed(r float64) PumpSet {
	s.Speed = r
	return s
}

// Scaled returns the set with every member's head multiplied by k (at every
// flow): a worn or mis-rated set seen through one head multiplier. The
// combined head is then k times the set's, in parallel and in series.
func (s PumpSet) Scaled(k float64) PumpSet {
	out := s
	out.Members = make([]SetMember, len(s.Members))
	for i, m := range s.Members {
		m.Curve.A0 *= k
		m.Curve.A1 *= k
		m.Curve.A2 *= k
		out.Members[i] = m
	}
	return out
}

// Validate reports whether the set can serve as an element.
func (s PumpSet) Validate() error {
	if len(s.Members) == 0 {
		return fmt.Errorf("pump set: no pump runs: %w", ErrInvalid)
	}
	if !(s.Speed >= 0) || math.IsInf(s.Speed, 1) {
		return fmt.Errorf("pump set: speed ratio %g must be positive: %w", s.Speed, ErrInvalid)
	}
	for i, m := range s.Members {
		if !(m.Speed >= 0) || math.IsInf(m.Speed, 1) {
			return fmt.Errorf("pump set: pump %d: speed ratio %g must be positive: %w", i+1, m.Speed, ErrInvalid)
		}
		if err := s.curve(i).Validate(); err != nil {
			return fmt.Errorf("pump set: pump %d: %w", i+1, err)
		}
	}
	return nil
}

// Drop implements Element: dp = -ρ g H(q) with H the combined head.
func (s PumpSet) Drop(q float64, f fluid.State) (dp, slope float64) {
	h, dh := s.Head(q)
	rg := f.Density * StandardGravity
	return -rg * h, -rg * dh
}

// Head returns the combined head [m] at total flow q [m3/s] and its slope
// dH/dq, with the slope limits of each pump (see Pump).
func (s PumpSet) Head(q float64) (h, dh float64) {
	switch {
	case len(s.Members) == 0:
		return math.NaN(), math.NaN()
	case s.single():
		return s.Members[0].Curve.AtSpeed(s.speed()).headLimited(q)
	case s.Series:
		for i := range s.Members {
			hi, dhi := s.curve(i).headLimited(q)
			h += hi
			dh += dhi
		}
		return h, dh
	}
	cs := make([]PumpCurve, len(s.Members))
	for i := range cs {
		cs[i] = s.curve(i)
	}
	return parallelHead(cs, q)
}

// parallelHead returns the common head of pumps cs in parallel giving q
// together, and its slope: the head H at which the flows q_i(H) of the pumps
// whose zero-flow head exceeds H add up to q, found by a safeguarded Newton
// iteration on the monotone sum. At q <= 0 no non-return valve opens but
// the highest pump's: the head continues along that pump's curve (as for a
// single Pump), so head and slope stay continuous.
func parallelHead(cs []PumpCurve, q float64) (h, dh float64) {
	top, hTop := 0, math.Inf(-1)
	for i, c := range cs {
		if h0, _ := c.headLimited(0); h0 > hTop {
			top, hTop = i, h0
		}
	}
	if q <= 0 {
		return cs[top].headLimited(q)
	}
	// Bracket: at hTop the pumps give nothing; at the lowest head any one
	// pump has giving q alone, the pumps together give at least q.
	hi, lo := hTop, math.Inf(1)
	for _, c := range cs {
		hq, _ := c.headLimited(q)
		lo = math.Min(lo, hq)
	}
	sum := func(h float64) (g, dg float64) {
		for _, c := range cs {
			qi, dqi := c.flowAt(h)
			if qi > 0 {
				g += qi
				dg += dqi
			}
		}
		return g - q, dg
	}
	h = lo
	scale := math.Max(math.Abs(hTop), math.Abs(lo))
	for range 200 {
		g, dg := sum(h)
		if g == 0 {
			break
		}
		if g > 0 {
			lo = h
		} else {
			hi = h
		}
		next := h - g/dg
		if !(dg < 0) || !(next > lo && next < hi) {
			next = 0.5 * (lo + hi)
		}
		if math.Abs(next-h) <= 1e-15*scale || hi-lo <= 1e-15*scale {
			h = next
			break
		}
		h = next
	}
	_, dg := sum(h)
	if !(dg < 0) {
		// Only at a pump's cut-in head with every other pump shut: take
		// the top pump's slope, which is the one running.
		_, d := cs[top].headLimited(q)
		return h, d
	}
	return h, 1 / dg
}

// flowAt returns the flow at which the slope-limited curve (headLimited)
// gives head h, and dq/dh: the curve falls strictly, so there is one.
func (c PumpCurve) flowAt(h float64) (q, dq float64) {
	lo, hi, ok := c.falling()
	if !ok {
		floor, err := c.slopeFloor()
		if err != nil || floor == 0 {
			return math.NaN(), math.NaN()
		}
		return (c.A0 - h) / floor, -1 / floor
	}
	if hl := c.Head(lo); h >= hl {
		return lo + (h-hl)/c.Slope(lo), 1 / c.Slope(lo)
	}
	if !math.IsInf(hi, 1) {
		if hh := c.Head(hi); h <= hh {
			return hi + (h-hh)/c.Slope(hi), 1 / c.Slope(hi)
		}
	}
	// A2 q² + A1 q + (A0 - h) = 0 on (lo, hi), where the quadratic falls.
	switch {
	case c.A2 == 0:
		q = (h - c.A0) / c.A1
	default:
		b, cc := c.A1, c.A0-h
		d := math.Sqrt(math.Max(b*b-4*c.A2*cc, 0))
		// The two roots written without cancellation; keep the one in
		// the falling interval.
		var r1 float64
		if b >= 0 {
			r1 = (-b - d) / (2 * c.A2)
		} else {
			r1 = (-b + d) / (2 * c.A2)
		}
		r2 := cc / (c.A2 * r1)
		if r1 == 0 {
			r2 = -b / c.A2
		}
		q = r1
		if dist(r2, lo, hi) < dist(r1, lo, hi) {
			q = r2
		}
		q = math.Min(math.Max(q, lo), hi)
	}
	// One Newton step polishes the root to the working precision.
	if s := c.Slope(q); s < 0 {
		q -= (c.Head(q) - h) / s
	}
	return q, 1 / c.Slope(q)
}

// dist returns how far x lies outside [lo, hi].
func dist(x, lo, hi float64) float64 {
	switch {
	case x < lo:
		return lo - x
	case x > hi:
		return x - hi
	}
	return 0
}

// Flows returns each member's flow [m3/s] when the set gives total flow q:
// in series every pump carries q; in parallel each gives its flow at the
// common head (0 for a pump held shut by its non-return valve).
func (s PumpSet) Flows(q float64) []float64 {
	out := make([]float64, len(s.Members))
	if s.Series || len(s.Members) == 1 {
		for i := range out {
			out[i] = q
		}
		return out
	}
	h, _ := s.Head(q)
	for i := range out {
		qi, _ := s.curve(i).flowAt(h)
		out[i] = math.Max(qi, 0)
	}
	return out
}

// Heads returns each member's head [m] at total flow q: the common head in
// parallel, its own head at q in series.
func (s PumpSet) Heads(q float64) []float64 {
	out := make([]float64, len(s.Members))
	if !s.Series || len(s.Members) == 1 {
		h, _ := s.Head(q)
		for i := range out {
			out[i] = h
		}
		return out
	}
	for i := range out {
		out[i], _ = s.curve(i).headLimited(q)
	}
	return out
}

// ShutOff returns the combined head at zero flow [m] of the quadratics (as
// PumpCurve.ShutOff): the highest pump's in parallel, the sum in series.
func (s PumpSet) ShutOff() float64 {
	var h float64
	for i := range s.Members {
		h0 := s.curve(i).ShutOff()
		if s.Series {
			h += h0
		} else {
			h = math.Max(h, h0)
		}
	}
	return h
}

// MaxFlow returns the combined flow at zero head (run-out), or an error
// when the set's head never falls to zero. A single pump's is its curve's
// MaxFlow.
func (s PumpSet) MaxFlow() (float64, error) {
	if len(s.Members) == 0 {
		return 0, fmt.Errorf("pump set: no pump runs: %w", ErrInvalid)
	}
	if s.single() {
		return s.Members[0].Curve.AtSpeed(s.speed()).MaxFlow()
	}
	if !s.Series {
		var q float64
		for i := range s.Members {
			qi, err := s.curve(i).MaxFlow()
			if err != nil {
				return 0, err
			}
			q += qi
		}
		return q, nil
	}
	// Series: the head falls strictly; bracket its zero and bisect.
	var hi float64
	for i := range s.Members {
		qi, err := s.curve(i).MaxFlow()
		if err != nil {
			return 0, err
		}
		hi = math.Max(hi, qi)
	}
	lo := 0.0
	for range 200 {
		mid := 0.5 * (lo + hi)
		if h, _ := s.Head(mid); h > 0 {
			lo = mid
		} else {
			hi = mid
		}
		if hi-lo <= 1e-15*hi {
			break
		}
	}
	return 0.5 * (lo + hi), nil
}

// RefFlow returns a flow that scales the set's curve: the sum (parallel) or
// largest (series) of the members' fitted flow ranges, else the run-out.
func (s PumpSet) RefFlow() float64 {
	var q float64
	for i := range s.Members {
		c := s.curve(i)
		qi := c.QMax
		if !(qi > 0) {
			if v, err := c.MaxFlow(); err == nil {
				qi = v
			}
		}
		if s.Series {
			q = math.Max(q, qi)
		} else {
			q += qi
		}
	}
	return q
}

// SpeedFor returns the set speed ratio at which the set gives pressure rise
// dp [Pa] at flow q [m3/s], NaN where no speed up to ten times rated does.
// A single pump's is SpeedFor of its curve. For a set, the combined head at
// q rises with the speed (each pump's does), so the speed is found by
// bisection on the slope-limited head.
func (s PumpSet) SpeedFor(q, dp float64, f fluid.State) float64 {
	if s.single() {
		return SpeedFor(s.Members[0].Curve, q, dp, f)
	}
	h := dp / (f.Density * StandardGravity)
	at := func(r float64) float64 { v, _ := s.AtSpeed(r).Head(q); return v - h }
	lo, hi := 1e-3, 10.0
	if at(hi) < 0 || at(lo) > 0 {
		return math.NaN()
	}
	for range 200 {
		mid := 0.5 * (lo + hi)
		if at(mid) < 0 {
			lo = mid
		} else {
			hi = mid
		}
		if hi-lo <= 1e-13*hi {
			break
		}
	}
	return 0.5 * (lo + hi)
}

// EfficiencyCurve is a pump's efficiency against flow at its rated speed,
// from points of its data sheet (flows rising), interpolated linearly and
// held at the end values beyond them. At speed ratio s the efficiency at
// flow q is the rated curve's at q/s: the affinity laws move a duty along a
// parabola on which the efficiency stays about constant (approximate: it
// falls at low speed and in small pumps).
type EfficiencyCurve struct {
	Flow, Eff []float64 // m3/s, fractions
}

// At returns the efficiency at flow q [m3/s] at speed ratio s, and whether
// q/s lies within the points (outside, the nearest end's value is given).
// It returns NaN for a curve without points.
func (c EfficiencyCurve) At(q, s float64) (eta float64, inRange bool) {
	n := len(c.Flow)
	if n == 0 || len(c.Eff) != n || !(s > 0) {
		return math.NaN(), false
	}
	x := q / s
	switch {
	case x <= c.Flow[0]:
		return c.Eff[0], x == c.Flow[0]
	case x >= c.Flow[n-1]:
		return c.Eff[n-1], x == c.Flow[n-1]
	}
	i := 1
	for c.Flow[i] < x {
		i++
	}
	t := (x - c.Flow[i-1]) / (c.Flow[i] - c.Flow[i-1])
	return c.Eff[i-1] + t*(c.Eff[i]-c.Eff[i-1]), true
}

// Speeds returns each member's speed ratio in the set.
func (s PumpSet) Speeds() []float64 {
	out := make([]float64, len(s.Members))
	for i, m := range s.Members {
		out[i] = s.speed()
		if m.Speed > 0 {
			out[i] = m.Speed
		}
	}
	return out
}

// Relative returns, for a set none of whose pumps follows the set's speed
// (each on its own fixed speed), the same set with every pump following it
// from its own speed: at set speed 1 each runs at its own, and a set speed
// r turns every one by r. ok is false, and the set is returned as it is,
// where a pump follows the set's speed already.
func (s PumpSet) Relative() (out PumpSet, ok bool) {
	for _, m := range s.Members {
		if m.Speed == 0 {
			return s, false
		}
	}
	out = s
	out.Members = make([]SetMember, len(s.Members))
	for i, m := range s.Members {
		out.Members[i] = SetMember{Curve: m.Curve.AtSpeed(m.Speed)}
	}
	return out, len(s.Members) > 0
}
