package calibrate

import (
	"errors"
	"math"
)

// Test points that read wrong: the second explanation of a branch found off
// design through its own valve's test points alone. A partly blocked
// tapping, air in a sensing line or a sensor off its calibration scales the
// valve differential read, and the flow the meter derives from it through
// the valve's table, by one factor; with the branch differential read
// right, at one valve setting that is exactly what a fouled terminal (or,
// reading high, a branch passing far more than designed) looks like behind
// correct readings.
const (
	// TestPointShare is the prior probability that a branch's test-point
	// readings are off that way: about one in twenty-five (common practice,
	// no source).
	TestPointShare = 0.04
	// TestPointMax bounds the flow error such readings carry, ±40 %, taken
	// as uniform (common practice, no source). A meter dialled to the wrong
	// valve does not count: its flow then disagrees with the differential
	// through the table, which the fit sees.
	TestPointMax = 0.4
	// testPointFloor is the sd, in ln of the valve differential, of what
	// the local model leaves out between two states besides the gauges:
	// the table's interpolation between its printed points and the fixed
	// parts' departure from their design law (common practice, no source).
	testPointFloor = 0.01
)

// TestPointState is one survey state of a branch read through its valve's
// test points: the valve differential as read and the differential across
// the whole branch, read by another gauge or, where none was read, the
// fitted model's.
type TestPointState struct {
	Setting          float64 // the valve's setting, in its own units
	Valve, ValveSD   float64 // valve differential read and its standard uncertainty, Pa
	Branch, BranchSD float64 // branch differential and its standard uncertainty, Pa
	// Modelled marks a branch differential that is the fitted model's:
	// the models' differentials share one error of sd TestPointCase.ModelSD
	// in ln (the header's and the pump's), the read ones do not.
	Modelled bool
	// ValveDrop is the valve's drop at the state's setting on its table,
	// Pa, and its slope, at flow q (m3/s).
	ValveDrop func(q float64) (dp, slope float64)
}

// TestPointCase is a branch to weigh: its states and the drop across its
// fixed parts (terminal, pipe, fittings) as designed, which the branch's
// resistance multiplier scales.
type TestPointCase struct {
	States []TestPointState
	Fixed  func(q float64) (dp, slope float64)
	// ModelSD is the sd of the common ln error of the modelled branch
	// differentials; 0 means 0.03 (the fitted header and pump).
	ModelSD float64
	// The priors; 0 means the package default: the branch's resistance
	// multiplier is clean (sd PriorClean in ln) or, with probability
	// FaultShare, faulty (sd PriorResistance); its test points read off
	// with probability Share, by a flow factor uniform within ±Max.
	FaultShare, PriorClean, PriorResistance, Share, Max float64
}

// TestPointVerdict is what the readings say of a branch's test points.
type TestPointVerdict struct {
	// Settings is the number of different valve settings the test points
	// were read at: with one, only the priors separate the explanations.
	Settings int
	// Weight is the posterior probability that the test points read off.
	Weight float64
	// Off is the posterior mean of the flow error they read with if so
	// (reading over true flow, less 1).
	Off float64
	// Ratio is the posterior mean of the branch's resistance multiplier
	// (geometric) if the test points read off, RatioRight if they read
	// right.
	Ratio, RatioRight float64
}

// ErrTestPoints reports a case that cannot be weighed: no state, a
// differential or uncertainty that is not positive, a valve differential
// above the branch's.
var ErrTestPoints = errors.New("calibrate: test points cannot be weighed")

// WeighTestPoints weighs a branch's test points reading off against their
// reading right, on the branch's readings in every state. In state k the
// branch passes the flow q_k at which m·F(q) + V_k(q) equals its
// differential D_k (F the fixed parts as designed, V_k the valve on its
// table at the state's setting, m the resistance multiplier), and the test
// points read g·V_k(q_k), g = (1+b)² for a flow error b. At one setting
// every b has an m that fits (the ambiguity the plan hedges); at two or
// more the valve's share of the branch differential changes with its
// setting as m alone dictates, while g scales every state alike, so the
// two separate. The posterior is summed on a grid of ln m (step 0.01) and
// b (step 0.005) under the priors (marginal likelihoods, as in Kass and
// Raftery, J. Am. Stat. Assoc. 90, 1995): the ln residuals of the valve
// differentials are Gaussian with the gauges' uncertainties, the branch
// differential's carried at unit sensitivity (square law), a floor for the
// local model, and the modelled differentials' common error.
func WeighTestPoints(c TestPointCase) (TestPointVerdict, error) {
	n := len(c.States)
	if n == 0 || c.Fixed == nil {
		return TestPointVerdict{}, ErrTestPoints
	}
	def := func(v, d float64) float64 {
		if v > 0 {
			return v
		}
		return d
	}
	modelSD := def(c.ModelSD, 0.03)
	fs := def(c.FaultShare, DefaultFaultShare)
	sc, sf := def(c.PriorClean, DefaultPriorClean), def(c.PriorResistance, DefaultPriorResistance)
	share, bmax := def(c.Share, TestPointShare), def(c.Max, TestPointMax)
	settings := map[float64]bool{}
	lnV := make([]float64, n)
	dinv := make([]float64, n) // the independent variances' inverses
	u := make([]float64, n)    // 1 for a modelled branch differential
	for k, s := range c.States {
		if !(s.Valve > 0) || !(s.Branch > 0) || !(s.ValveSD > 0) || !(s.BranchSD > 0) || s.ValveDrop == nil || s.Valve > 1.5*s.Branch {
			return TestPointVerdict{}, ErrTestPoints
		}
		settings[s.Setting] = true
		lnV[k] = math.Log(s.Valve)
		rv, rb := s.ValveSD/s.Valve, s.BranchSD/s.Branch
		dinv[k] = 1 / (rv*rv + rb*rb + testPointFloor*testPointFloor)
		if s.Modelled {
			u[k] = 1
		}
	}
	// Σ⁻¹ = D⁻¹ - c² D⁻¹uuᵀD⁻¹/(1 + c² uᵀD⁻¹u) (Sherman-Morrison).
	var uDu float64
	for k := range n {
		uDu += u[k] * u[k] * dinv[k]
	}
	corr := modelSD * modelSD / (1 + modelSD*modelSD*uDu)
	quad := func(x, y []float64) float64 {
		var xy, xu, yu float64
		for k := range n {
			xy += x[k] * y[k] * dinv[k]
			xu += x[k] * u[k] * dinv[k]
			yu += y[k] * u[k] * dinv[k]
		}
		return xy - corr*xu*yu
	}
	ones := make([]float64, n)
	for k := range ones {
		ones[k] = 1
	}
	cc := quad(ones, ones)

	const step, bstep = 0.01, 0.005
	lo, hi := -1.5, 3.0
	nm := int(math.Round((hi-lo)/step)) + 1
	nb := int(math.Round(2*bmax/bstep)) + 1
	ts := make([]float64, nb)
	for j := range ts {
		ts[j] = 2 * math.Log1p(-bmax+float64(j)*bstep)
	}
	// Per ln m: the residuals at g = 1 and the quadratic form's terms in
	// t = ln g: Q(t) = a - 2tb + t²c.
	r := make([]float64, n)
	type row struct{ lnm, lp, a, b float64 }
	rows := make([]row, 0, nm)
	for im := range nm {
		lnm := lo + float64(im)*step
		mm := math.Exp(lnm)
		ok := true
		for k, s := range c.States {
			q, err := branchFlow(c.Fixed, s.ValveDrop, mm, s.Branch)
			if err != nil {
				ok = false
				break
			}
			v, _ := s.ValveDrop(q)
			if !(v > 0) {
				ok = false
				break
			}
			r[k] = lnV[k] - math.Log(v)
		}
		if !ok {
			continue
		}
		prior := (1-fs)*math.Exp(normLogPDF(lnm, sc*sc)) + fs*math.Exp(normLogPDF(lnm, sf*sf))
		if !(prior > 0) {
			continue
		}
		rows = append(rows, row{lnm: lnm, lp: math.Log(prior), a: quad(r, r), b: quad(ones, r)})
	}
	if len(rows) == 0 {
		return TestPointVerdict{}, ErrTestPoints
	}
	// Log-weights under each explanation, then sums by the largest.
	l0 := make([]float64, len(rows))
	l1 := make([]float64, len(rows)*nb)
	max0, max1 := math.Inf(-1), math.Inf(-1)
	for i, w := range rows {
		l0[i] = w.lp - 0.5*w.a
		max0 = max(max0, l0[i])
		for j, t := range ts {
			v := w.lp - 0.5*(w.a-2*t*w.b+t*t*cc)
			l1[i*nb+j] = v
			max1 = max(max1, v)
		}
	}
	var s0, m0, s1, m1, b1 float64
	for i, w := range rows {
		e := math.Exp(l0[i] - max0)
		s0 += e
		m0 += e * w.lnm
		for j := range ts {
			e := math.Exp(l1[i*nb+j] - max1)
			s1 += e
			m1 += e * w.lnm
			b1 += e * (-bmax + float64(j)*bstep)
		}
	}
	// ln E0 = max0 + ln(s0·step); ln E1 = max1 + ln(s1·step·bstep/(2 bmax)).
	lnE0 := max0 + math.Log(s0*step) + math.Log(1-share)
	lnE1 := max1 + math.Log(s1*step*bstep/(2*bmax)) + math.Log(share)
	return TestPointVerdict{
		Settings:   len(settings),
		Weight:     1 / (1 + math.Exp(lnE0-lnE1)),
		Off:        b1 / s1,
		Ratio:      math.Exp(m1 / s1),
		RatioRight: math.Exp(m0 / s0),
	}, nil
}

// branchFlow is the flow q at which m·F(q) + V(q) = d: Newton's method on
// the sum, which rises with q, from the square law's estimate.
func branchFlow(fixed, valve func(q float64) (float64, float64), m, d float64) (float64, error) {
	q := 1e-3
	for range 60 {
		f, fs := fixed(q)
		v, vs := valve(q)
		g, gs := m*f+v-d, m*fs+vs
		if !(g+d > 0) || !(gs > 0) {
			return 0, ErrTestPoints
		}
		// The square law's step from q, then Newton's where it is the
		// nearer: both rise through the root.
		next := q * math.Sqrt(d/(g+d))
		if nt := q - g/gs; nt > 0 && math.Abs(nt-q) < math.Abs(next-q) {
			next = nt
		}
		if math.Abs(next-q) <= 1e-12*q {
			return next, nil
		}
		q = next
	}
	return q, nil
}
