package network

import (
	"errors"
	"fmt"
	"math"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
)

// ErrNoRoot: a curve does not reach the requested value (an inversion, a
// parallel split or a pump and system curve that do not cross).
var ErrNoRoot = errors.New("no solution on the curve")

// Curve is a pressure drop as a function of flow at a fixed fluid: an
// element, or a combination of elements and curves. Drop returns dp [Pa] at
// flow q [m3/s] and slope d(dp)/dq. Curves given to Parallel, Invert and
// Series for inversion must be nondecreasing (passive parts; a pump in
// element form, whose drop is minus its rising head, is nondecreasing too).
type Curve interface {
	Drop(q float64) (dp, slope float64)
}

type elementCurve struct {
	f     fluid.State
	elems []hydraulics.Element
}

func (c elementCurve) Drop(q float64) (dp, slope float64) {
	for _, e := range c.elems {
		d, s := e.Drop(q, c.f)
		dp += d
		slope += s
	}
	return dp, slope
}

// ElementCurve returns the curve of elements in series carrying fluid f.
func ElementCurve(f fluid.State, elems ...hydraulics.Element) Curve {
	return elementCurve{f: f, elems: append([]hydraulics.Element(nil), elems...)}
}

type series []Curve

func (s series) Drop(q float64) (dp, slope float64) {
	for _, c := range s {
		d, sl := c.Drop(q)
		dp += d
		slope += sl
	}
	return dp, slope
}

// Series returns curves in series: one flow, drops added.
func Series(cs ...Curve) Curve { return append(series(nil), cs...) }

// Parallel is curves in parallel between two common nodes: one
// differential, flows added. It is exact: the common differential is found
// by safeguarded Newton iteration with bisection, each branch flow by
// inverting its curve the same way (no fitted polynomials).
type Parallel struct {
	Curves []Curve
}

// Drop implements Curve: the common differential at total flow q and its
// slope 1/Σ(1/slope_i). It returns NaN where Split fails; call Split to
// learn why.
func (p Parallel) Drop(q float64) (dp, slope float64) {
	dp, flows, err := p.Split(q)
	if err != nil {
		return math.NaN(), math.NaN()
	}
	var g float64
	for i, c := range p.Curves {
		_, s := c.Drop(flows[i])
		if !(s > 0) {
			return dp, 0 // a branch with zero slope: the combination has none
		}
		g += 1 / s
	}
	return dp, 1 / g
}

// Split returns the common differential dp at total flow qTotal and each
// curve's flow. With nondecreasing curves the differential lies between the
// smallest and the largest drop of the curves at the equal share qTotal/n
// (some branch takes at least the share, some at most), which brackets the
// root from the start.
func (p Parallel) Split(qTotal float64) (dp float64, flows []float64, err error) {
	nc := len(p.Curves)
	if nc == 0 {
		return 0, nil, fmt.Errorf("parallel: no curves: %w", ErrInput)
	}
	if !finite(qTotal) {
		return 0, nil, fmt.Errorf("parallel: total flow %g: %w", qTotal, ErrInput)
	}
	share := qTotal / float64(nc)
	lo, hi := math.Inf(1), math.Inf(-1)
	for i, c := range p.Curves {
		d, _ := c.Drop(share)
		if !finite(d) {
			return 0, nil, fmt.Errorf("parallel: curve %d drop at %g m3/s is %g: %w", i, share, d, ErrElement)
		}
		lo, hi = min(lo, d), max(hi, d)
	}
	flows = make([]float64, nc)
	var ferr error
	g := func(dp float64) (v, dv float64) {
		for i, c := range p.Curves {
			q, err := Invert(c, dp)
			if err != nil {
				ferr = err
				return math.NaN(), math.NaN()
			}
			flows[i] = q
			_, s := c.Drop(q)
			v += q
			dv += 1 / s // +Inf for a zero slope: the Newton step is then 0 and bisection takes over
		}
		return v - qTotal, dv
	}
	if lo == hi {
		dp = lo
	} else {
		dp, err = rootBracketed(g, lo, hi)
	}
	if ferr != nil {
		return 0, nil, fmt.Errorf("parallel: %w", ferr)
	}
	if err != nil {
		return 0, nil, fmt.Errorf("parallel: total flow %g m3/s: %w", qTotal, err)
	}
	g(dp) // flows at the returned differential
	if ferr != nil {
		return 0, nil, fmt.Errorf("parallel: %w", ferr)
	}
	return dp, flows, nil
}

// Invert returns the flow at which curve c has drop dp, by safeguarded
// Newton iteration on a bracket grown from zero flow.
func Invert(c Curve, dp float64) (q float64, err error) {
	if !finite(dp) {
		return 0, fmt.Errorf("invert: drop %g: %w", dp, ErrInput)
	}
	g := func(q float64) (float64, float64) {
		d, s := c.Drop(q)
		return d - dp, s
	}
	q, err = rootFrom(g, 0, probeFlow)
	if err != nil {
		return 0, fmt.Errorf("invert: drop %g Pa: %w", dp, err)
	}
	return q, nil
}

// OperatingPoint returns the flow q >= 0 and differential dp where a pump
// meets a system. pump is either in element form (a gain as negative drop,
// as ElementCurve of a hydraulics.Pump gives) or a head curve in Pa
// (positive head); the sign at zero flow tells which. The system curve must
// be nondecreasing. dp is the system's drop, equal to the pump's head.
func OperatingPoint(pump, system Curve) (q, dp float64, err error) {
	h0, _ := pump.Drop(0)
	if !finite(h0) || h0 == 0 {
		return 0, 0, fmt.Errorf("operating point: pump gives %g Pa at zero flow, want a shut-off head: %w", h0, ErrInput)
	}
	sign := 1.0 // element form: total drop = system + pump
	if h0 > 0 {
		sign = -1 // head curve: system - head
	}
	g := func(q float64) (float64, float64) {
		ds, ss := system.Drop(q)
		dh, sh := pump.Drop(q)
		return ds + sign*dh, ss + sign*sh
	}
	if v, _ := g(0); !(v < 0) {
		s0, _ := system.Drop(0)
		return 0, 0, fmt.Errorf("operating point: shut-off head %g Pa does not exceed the system's %g Pa at zero flow: %w", math.Abs(h0), s0, ErrNoRoot)
	}
	q, err = rootFrom(g, 0, probeFlow)
	if err != nil {
		return 0, 0, fmt.Errorf("operating point: %w", err)
	}
	dp, _ = system.Drop(q)
	return q, dp, nil
}

// Sample returns n points (q, dp) of curve c at flows evenly spaced from 0
// to qMax, for tables and charts.
func Sample(c Curve, qMax float64, n int) [][2]float64 {
	if n <= 0 {
		return nil
	}
	pts := make([][2]float64, n)
	for k := range pts {
		q := 0.0
		if n > 1 {
			q = qMax * float64(k) / float64(n-1)
		}
		d, _ := c.Drop(q)
		pts[k] = [2]float64{q, d}
	}
	return pts
}

// rootFrom finds a root of the nondecreasing g starting at x0: it steps by
// scale, doubling, towards the sign change until the root is bracketed,
// then calls rootBracketed.
func rootFrom(g func(float64) (float64, float64), x0, scale float64) (float64, error) {
	v0, _ := g(x0)
	switch {
	case math.IsNaN(v0):
		return 0, fmt.Errorf("curve is not finite at %g: %w", x0, ErrElement)
	case v0 == 0:
		return x0, nil
	}
	dir := 1.0
	if v0 > 0 {
		dir = -1
	}
	lo := x0
	for step := scale; step < math.MaxFloat64/4; step *= 2 {
		x := x0 + dir*step
		v, _ := g(x)
		if math.IsNaN(v) {
			return 0, fmt.Errorf("curve is not finite at %g: %w", x, ErrElement)
		}
		if v == 0 {
			return x, nil
		}
		if (v > 0) == (v0 < 0) {
			if dir < 0 {
				return rootBracketed(g, x, lo)
			}
			return rootBracketed(g, lo, x)
		}
		lo = x
	}
	return 0, fmt.Errorf("no sign change found from %g: %w", x0, ErrNoRoot)
}

// rootBracketed finds the root of the nondecreasing g in [lo, hi], where
// g(lo) <= 0 <= g(hi), by Newton steps kept inside the bracket and
// bisection when a step leaves it or gains too little (a safeguarded Newton
// method, as rtsafe in Press et al., Numerical Recipes, §9.4).
func rootBracketed(g func(float64) (float64, float64), lo, hi float64) (float64, error) {
	vlo, _ := g(lo)
	vhi, _ := g(hi)
	if math.IsNaN(vlo) || math.IsNaN(vhi) {
		return 0, fmt.Errorf("curve is not finite on [%g, %g]: %w", lo, hi, ErrElement)
	}
	if vlo > 0 || vhi < 0 {
		return 0, fmt.Errorf("[%g, %g] does not bracket a root: %w", lo, hi, ErrNoRoot)
	}
	if vlo == 0 {
		return lo, nil
	}
	if vhi == 0 {
		return hi, nil
	}
	x := (lo + hi) / 2
	if math.Abs(vlo) < math.Abs(vhi) {
		x = lo
	} else {
		x = hi
	}
	width := hi - lo
	for range 300 {
		v, dv := g(x)
		if math.IsNaN(v) {
			return 0, fmt.Errorf("curve is not finite at %g: %w", x, ErrElement)
		}
		if v == 0 {
			return x, nil
		}
		if v < 0 {
			lo = x
		} else {
			hi = x
		}
		next := x - v/dv
		if !(next > lo && next < hi) || math.Abs(next-x) > width/2 {
			next = lo + (hi-lo)/2
		}
		width = math.Abs(next - x)
		if hi-lo <= 4*ulpOf(max(math.Abs(lo), math.Abs(hi))) || width <= 2*ulpOf(next) {
			return next, nil
		}
		x = next
	}
	return 0, fmt.Errorf("root finding did not converge on [%g, %g]: %w", lo, hi, ErrNoRoot)
}

// ulpOf returns the spacing of float64 values at |x|.
func ulpOf(x float64) float64 {
	x = math.Abs(x)
	return math.Nextafter(x, math.Inf(1)) - x
}
