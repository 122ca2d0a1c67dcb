package calibrate

import (
	"errors"
	"math"
	"sort"
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
	// ElsewhereShare is the prior probability that a valve sits off its
	// handwheel's mark by one offset in every state (a slipped handwheel or
	// memory stop, a valve set elsewhere than recorded): one in twenty
	// (common practice, no source). The offset is uniform over the valve's
	// range, as the fit's offset parameter's wide prior is.
	ElsewhereShare = 0.05
	// SeizedShare is the prior probability that a valve holds one Kv
	// whatever its handwheel says (a seized plug or a slipping handwheel),
	// with its test points right: as often as one off its mark, the two
	// being the fit's alternatives to the table side by side (common
	// practice, no source). Its Kv is uniform in ln over the table's span
	// widened by a factor e either way.
	SeizedShare = 0.05
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
}

// TestPointCase is a branch to weigh: its states, the drop across its
// fixed parts (terminal, pipe, fittings) as designed, which the branch's
// resistance multiplier scales, and its valve.
type TestPointCase struct {
	States []TestPointState
	Fixed  func(q float64) (dp, slope float64)
	// ValveR is the valve's square-law coefficient on its table at a
	// setting (Δp = ValveR·q², Pa and m3/s: the Kv definition of IEC
	// 60534-2-1), the setting clamped to Lo..Hi, its range.
	ValveR func(setting float64) float64
	Lo, Hi float64
	// ModelSD is the sd of the common ln error of the modelled branch
	// differentials; 0 means 0.03 (the fitted header and pump).
	ModelSD float64
	// The priors; 0 means the package default: the branch's resistance
	// multiplier is clean (sd PriorClean in ln) or, with probability
	// FaultShare, faulty (sd PriorResistance); its test points read off
	// with probability Share, by a flow factor uniform within ±Max; its
	// valve sits off its mark with probability Elsewhere, or holds one Kv
	// with probability Seized.
	FaultShare, PriorClean, PriorResistance, Share, Max, Elsewhere, Seized float64
}

// TestPointVerdict is what the readings say of a branch's test points.
type TestPointVerdict struct {
	// Settings is the number of different valve settings the test points
	// were read at: with one, only the priors separate the explanations.
	Settings int
	// Weight is the posterior probability that the test points read off
	// (the valve on its table), Elsewhere that the valve sits off its mark
	// by one offset with its test points right, Seized that it holds one
	// Kv with its test points right; the rest is both right.
	Weight, Elsewhere, Seized float64
	// Off is the posterior mean of the flow error they read with if so
	// (reading over true flow, less 1).
	Off float64
	// Ratio is the posterior mean of the branch's resistance multiplier
	// (geometric) if the test points read off, RatioRight if they read
	// right.
	Ratio, RatioRight float64
	// RatioSD is the posterior sd of ln Ratio: how well the readings place
	// the branch's resistance if its test points read off.
	RatioSD float64
}

// ErrTestPoints reports a case that cannot be weighed: no state, a
// differential or uncertainty that is not positive, a valve differential
// above the branch's.
var ErrTestPoints = errors.New("calibrate: test points cannot be weighed")

// WeighTestPoints weighs a branch's test points reading off against their
// reading right, on the branch's readings in every state. In state k the
// branch passes the flow q_k at which m·F(q) + R_k·q² equals its
// differential D_k (F the fixed parts as designed, R_k the valve on its
// table at the state's setting, m the resistance multiplier), and the test
// points read g·R_k·q_k², g = (1+b)² for a flow error b. At one setting
// every b has an m that fits (the ambiguity the plan hedges); at two or
// more the valve's share of the branch differential changes with its
// setting as m alone dictates, while g scales every state alike, so the
// two separate. A third explanation, the valve off its mark by one offset
// δ (R_k at the setting plus δ) with the test points right, is weighed
// beside them where the valve's range is given: at several settings it can
// mimic part of either. So is a fourth, the valve seized (one R whatever
// the setting) with its test points right: the fit's other alternative to
// the table, which test points reading off at several settings can also
// look like to a fit that does not hold them (the valve's share of the
// branch differential moving with its setting, but not as the table and
// the readings say).
//
// The posteriors are summed on grids of ln m (step 0.01), b (step 0.005)
// and δ (a hundredth of the range) under the priors (marginal likelihoods,
// as in Kass and Raftery, J. Am. Stat. Assoc. 90, 1995): the ln residuals
// of the valve differentials are Gaussian with the gauges' uncertainties,
// the branch differential's carried at unit sensitivity (square law), a
// floor for the local model, and the modelled differentials' common error.
// F is taken as the power law through its drop and slope where it carries
// the first state's differential (Darcy-Weisbach friction varies slowly
// with flow), so that each grid point costs a few Newton steps.
func WeighTestPoints(c TestPointCase) (TestPointVerdict, error) {
	n := len(c.States)
	if n == 0 || c.Fixed == nil || c.ValveR == nil {
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
	elsewhere := def(c.Elsewhere, ElsewhereShare)
	seized := def(c.Seized, SeizedShare)
	settings := map[float64]bool{}
	lnV := make([]float64, n)
	dinv := make([]float64, n) // the independent variances' inverses
	u := make([]float64, n)    // 1 for a modelled branch differential
	// A valve differential read above the branch's is what test points
	// reading high give (the valve taking most of the branch's
	// differential, read (1+b)² times): beyond what the largest error
	// weighed gives, with the gauges' spread, nothing here explains it.
	gmax := (1 + bmax) * (1 + bmax)
	for k, s := range c.States {
		if !(s.Valve > 0) || !(s.Branch > 0) || !(s.ValveSD > 0) || !(s.BranchSD > 0) || s.Valve-2*s.ValveSD > gmax*(s.Branch+2*s.BranchSD) {
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
	if !(c.Hi > c.Lo) || len(settings) < 2 {
		// At one setting an offset, or a seized valve's one Kv, is a
		// multiple of the valve's resistance, which the branch's
		// multiplier takes up.
		elsewhere, seized = 0, 0
	}
	a, pw, err := powerLaw(c.Fixed, c.States[0].Branch)
	if err != nil {
		return TestPointVerdict{}, err
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
	const lo, hi = -1.5, 3.0
	nm := int(math.Round((hi-lo)/step)) + 1
	nb := int(math.Round(2*bmax/bstep)) + 1
	ts := make([]float64, nb)
	for j := range ts {
		ts[j] = 2 * math.Log1p(-bmax+float64(j)*bstep)
	}
	lnPrior := func(lnm float64) float64 {
		return math.Log((1-fs)*math.Exp(normLogPDF(lnm, sc*sc)) + fs*math.Exp(normLogPDF(lnm, sf*sf)))
	}
	// residuals fills r with each state's ln valve differential read less
	// the model's at multiplier mm and valve coefficients rs, g = 1.
	r := make([]float64, n)
	residuals := func(mm float64, rs []float64) bool {
		for k, s := range c.States {
			q, ok := powerFlow(mm*a, pw, rs[k], s.Branch)
			if !ok {
				return false
			}
			r[k] = lnV[k] - math.Log(rs[k]*q*q)
		}
		return true
	}
	rs := make([]float64, n)
	for k, s := range c.States {
		rs[k] = c.ValveR(s.Setting)
		if !(rs[k] > 0) {
			return TestPointVerdict{}, ErrTestPoints
		}
	}
	// On the table: per ln m, Q(t) = qa - 2t·qb + t²cc in t = ln g.
	var e0, e1 logSum
	var m0, m1, mm1, b1 float64 // sums of weight times ln m, (ln m)² or b, by the largest's scale
	type row struct{ lnm, lp, qa, qb float64 }
	var rows []row
	for im := range nm {
		lnm := lo + float64(im)*step
		if !residuals(math.Exp(lnm), rs) {
			continue
		}
		rows = append(rows, row{lnm, lnPrior(lnm), quad(r, r), quad(ones, r)})
	}
	if len(rows) == 0 {
		return TestPointVerdict{}, ErrTestPoints
	}
	// Q(t) is least at t = qb/cc; beyond 9 sd of it (Q up by 81) a
	// term is under e^-40 of the row's best and is left out.
	window := func(w row) (int, int) {
		t0, h := w.qb/cc, 9/math.Sqrt(cc)
		j0 := sort.SearchFloat64s(ts, t0-h)
		j1 := sort.SearchFloat64s(ts, t0+h)
		return j0, min(j1+1, nb)
	}
	for _, w := range rows {
		e0.add(w.lp - 0.5*w.qa)
		j0, j1 := window(w)
		for _, t := range ts[j0:j1] {
			e1.add(w.lp - 0.5*(w.qa-2*t*w.qb+t*t*cc))
		}
	}
	for _, w := range rows {
		m0 += e0.weight(w.lp-0.5*w.qa) * w.lnm
		j0, j1 := window(w)
		for j := j0; j < j1; j++ {
			t := ts[j]
			wt := e1.weight(w.lp - 0.5*(w.qa-2*t*w.qb+t*t*cc))
			m1 += wt * w.lnm
			mm1 += wt * w.lnm * w.lnm
			b1 += wt * (-bmax + float64(j)*bstep)
		}
	}
	if e1.n == 0 {
		return TestPointVerdict{}, ErrTestPoints
	}
	lnE0 := e0.log() + math.Log(step) + math.Log(1-share-elsewhere-seized)
	lnE1 := e1.log() + math.Log(step*bstep/(2*bmax)) + math.Log(share)
	lnE2 := math.Inf(-1)
	if elsewhere > 0 {
		// Off its mark: δ over the range (both ways), ln m coarser.
		const nd, mstep = 61, 0.05
		span := c.Hi - c.Lo
		dstep := 2 * span / float64(nd-1)
		var e2 logSum
		rd := make([]float64, n)
		for id := range nd {
			d := -span + float64(id)*dstep
			if d == 0 {
				continue
			}
			for k, s := range c.States {
				rd[k] = c.ValveR(min(max(s.Setting+d, c.Lo), c.Hi))
			}
			for lnm := lo; lnm <= hi+1e-9; lnm += mstep {
				if residuals(math.Exp(lnm), rd) {
					e2.add(lnPrior(lnm) - 0.5*quad(r, r))
				}
			}
		}
		if e2.n > 0 {
			lnE2 = e2.log() + math.Log(mstep*dstep/(2*span)) + math.Log(elsewhere)
		}
	}
	lnE3 := math.Inf(-1)
	if seized > 0 {
		// Seized: one coefficient in every state, ln of it over the
		// table's span widened by 1 either way, ln m coarser.
		const sstep, mstep = 0.05, 0.05
		rl, rh := c.ValveR(c.Lo), c.ValveR(c.Hi)
		a0, a1 := math.Log(min(rl, rh))-1, math.Log(max(rl, rh))+1
		if a1 > a0 {
			var e3 logSum
			rd := make([]float64, n)
			for ls := a0; ls <= a1+1e-9; ls += sstep {
				for k := range rd {
					rd[k] = math.Exp(ls)
				}
				for lnm := lo; lnm <= hi+1e-9; lnm += mstep {
					if residuals(math.Exp(lnm), rd) {
						e3.add(lnPrior(lnm) - 0.5*quad(r, r))
					}
				}
			}
			if e3.n > 0 {
				lnE3 = e3.log() + math.Log(mstep*sstep/(a1-a0)) + math.Log(seized)
			}
		}
	}
	top := max(lnE0, lnE1, lnE2, lnE3)
	z := math.Exp(lnE0-top) + math.Exp(lnE1-top) + math.Exp(lnE2-top) + math.Exp(lnE3-top)
	return TestPointVerdict{
		Settings:   len(settings),
		Weight:     math.Exp(lnE1-top) / z,
		Elsewhere:  math.Exp(lnE2-top) / z,
		Seized:     math.Exp(lnE3-top) / z,
		Off:        b1,
		Ratio:      math.Exp(m1),
		RatioRight: math.Exp(m0),
		RatioSD:    math.Sqrt(max(mm1-m1*m1, 0)),
	}, nil
}

// logSum sums exponentials of log-weights without overflow: the largest
// is found first (add), then weight gives each one's share of the sum.
type logSum struct {
	max, sum float64
	n        int
}

func (l *logSum) add(v float64) {
	if l.n == 0 || v > l.max {
		if l.n > 0 {
			l.sum *= math.Exp(l.max - v)
		}
		l.max = v
	}
	l.sum += math.Exp(v - l.max)
	l.n++
}

func (l *logSum) log() float64 { return l.max + math.Log(l.sum) }

func (l *logSum) weight(v float64) float64 { return math.Exp(v-l.max) / l.sum }

// powerLaw returns a and p of the power law a·q^p through fixed's drop and
// slope at the flow where the drop is d.
func powerLaw(fixed func(q float64) (float64, float64), d float64) (a, p float64, err error) {
	q := 1e-3
	for range 60 {
		f, _ := fixed(q)
		if !(f > 0) {
			return 0, 0, ErrTestPoints
		}
		next := q * math.Sqrt(d/f)
		if math.Abs(next-q) <= 1e-10*q {
			q = next
			break
		}
		q = next
	}
	f, fs := fixed(q)
	if !(f > 0) || !(fs > 0) {
		return 0, 0, ErrTestPoints
	}
	p = q * fs / f
	return f / math.Pow(q, p), p, nil
}

// powerFlow is the flow q at which a·q^p + r·q² = d (Newton's method on
// the rising sum, from the square law's estimate).
func powerFlow(a, p, r, d float64) (float64, bool) {
	q := math.Sqrt(d / (a + r))
	for range 30 {
		qp := math.Pow(q, p)
		g := a*qp + r*q*q - d
		gs := p*a*qp/q + 2*r*q
		if !(gs > 0) {
			return 0, false
		}
		next := q - g/gs
		if !(next > 0) {
			next = q / 2
		}
		if math.Abs(next-q) <= 1e-12*q {
			return next, true
		}
		q = next
	}
	return q, true
}
