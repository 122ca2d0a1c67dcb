package balance

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sort"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"flowset/internal/parallel"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// ReadKind is how a candidate reading is taken.
type ReadKind int

// Kinds of candidate readings.
const (
	// ByValveMeter: the branch's flow from its valve's differential at the
	// test points and the valve's table (the differential comes with it).
	ByValveMeter ReadKind = iota
	// ByClampOn: the branch's flow by a clamp-on meter.
	ByClampOn
	// AtPump: the pump's differential and the circuit's total flow.
	AtPump
)

// String names the kind as the readings sheet does.
func (k ReadKind) String() string {
	switch k {
	case ByValveMeter:
		return "valve-meter"
	case ByClampOn:
		return "clamp-on"
	case AtPump:
		return "pump"
	}
	return "read(?)"
}

// Defaults of ReadOptions. The sds are half the instrument table's
// expanded uncertainties (site.Instruments: valve meter ±10 %, clamp-on
// ±5 %, manometer ±2 %, at k = 2); the minutes are common practice, no
// source: a valve meter is fitted to test points in a few minutes, a
// clamp-on needs a straight run found, the pipe measured and lagging opened.
const (
	defaultMeterSD    = 0.05
	defaultClampSD    = 0.025
	defaultPumpDiffSD = 0.01
	defaultMeterCost  = 5
	defaultClampCost  = 15
	defaultPumpCost   = 5
	// maxRankBranches bounds the branches the ranking follows: the most
	// uncertain ones and those that may be the index. The covariance of
	// their flows is dense, so the work grows with the square of them.
	maxRankBranches = 300
	// maxNeedRows bounds the branches whose need may be the largest.
	maxNeedRows = 30
	// indexWeight is the share of the Monte Carlo draws in which a branch
	// must need the most for it to be called a contender for the index.
	indexWeight = 0.05
	needDraws   = 2000
)

// ReadOptions tune RankReadings. A zero field means the default.
type ReadOptions struct {
	// Uncertainty is the calibration's spread; nil: nothing to rank.
	Uncertainty *Uncertainty
	// MeterSD, ClampSD and PumpDiffSD are the standard uncertainties of
	// the ln of a flow read by valve meter, by clamp-on, and of a pump
	// differential.
	MeterSD, ClampSD, PumpDiffSD float64
	// MeterCost, ClampCost and PumpCost are the minutes each takes.
	MeterCost, ClampCost, PumpCost float64
	// ModelSD is the sd of the model's own error of a branch's ln flow,
	// beyond the multipliers' spread (Kv tables interpolated, fittings and
	// headers lumped), independent between branches; 0 means 0.025, a
	// negative value none. On 34 independent test plants the plan's rms
	// deviation was 2-4 % against 1-2 % for the all-knowing best while the
	// fit's bands claimed far less; without it a plant the fit "knows"
	// ranks nothing.
	ModelSD float64
	// ReadAt is the state the readings are taken in; nil: the plan's
	// (readings after setting). A survey before the visit reads the plant
	// as found.
	ReadAt *plant.State
	// Max is the most readings listed; 0 lists all that lower the risk at
	// all (the last may lower it very little: see Candidate.Gain).
	Max int
	// Decides is, by model index, the risk a first reading of the branch
	// after setting removes beyond its band's narrowing (nil: none): a
	// branch planned on one of two explanations its readings so far
	// cannot tell apart, which its reading at the new setting decides
	// (the expected branches outside the tolerance under the explanation
	// it was not planned for). DecidesWhy says what it decides.
	Decides    []float64
	DecidesWhy []string
	// Workers bounds the goroutines the ranking's independent work (the
	// sensitivity solves, the covariance's rows) runs on side by side; 0
	// means runtime.GOMAXPROCS(0), 1 one after another. The ranking is
	// the same bit for bit whatever it is.
	Workers int
}

// Candidate is one reading worth taking after setting.
type Candidate struct {
	// Where is the branch ID, or "pump".
	Where string
	// Index is the model index of the branch (-1 for the pump).
	Index int
	How   ReadKind
	// Expect is the value the reading should give if the plan is right:
	// the branch's flow, m3/s (a valve meter's as its table reads it), or
	// the pump's differential, Pa; Low and High the 95 % band the reading
	// should fall in (the model's spread of the quantity now, before any
	// reading listed, and the instrument's own).
	Expect, Low, High float64
	// Quantity is what Expect is: site.Flow at a branch; at the pump
	// site.PumpDiff when the pump runs on its curve, site.TotalFlow when
	// a held differential fixes the pump's (the total flow is then what
	// the reading tells).
	Quantity site.Quantity
	// Minutes the reading takes.
	Minutes float64
	// Gain is the risk it removes, taken after the readings above it:
	// expected branches outside the tolerance after the trims, the
	// pump's need counted as below.
	Gain float64
	// Settles says what the reading decides.
	Settles string
	// Check marks a reading taken once with the branch's valve moved to
	// At for it and then put back (a state of its own), its test points
	// read at a second setting; Expect and the band are then at At. The
	// ranking leaves it false: its caller knows which readings decide so.
	Check bool
	At    float64
}

// ReadPlan is the ranking of the readings to take after setting.
type ReadPlan struct {
	// Risk is the expected number of branches outside the tolerance after
	// setting and trimming with what is known now (see RankReadings), and
	// RiskAfter once every listed reading is taken.
	Risk, RiskAfter float64
	// NeedSD is the sd of the ln of the least differential the plant
	// needs (the index circuit's), and Contenders the branches that may be
	// the index (each the most needing in over 5 % of the draws), the
	// plan's index first.
	NeedSD     float64
	Contenders []string
	// Readings in the order to take them.
	Readings []Candidate
	// Note says why nothing is ranked ("" when ranked).
	Note string
}

// RankReadings ranks the readings to take after setting by how much each
// lowers the plan's risk, per minute it takes. The model is linearised at
// the plan: every branch's ln flow, each valve meter's ln reading (the flow
// over the valve's Kv scale), the ln total flow and pump differential, and
// the ln of what each branch's chain needs at target are linear in the ln
// multipliers, whose spread (Uncertainty, independent) gives the joint
// covariance of them all. A reading is a noisy observation of one of them;
// it updates the covariance by the Kalman (rank-one) formula, whatever
// value it gives. The risk is the expected number of branches outside the
// tolerance once each is trimmed to what the model then says: a branch
// whose ln flow has sd s is outside with probability Φ(t_lo/s)+1-Φ(t_hi/s);
// plus the pump's: the least differential (the largest chain need) is
// linearised about the branches that may be the index, weighted by how
// often each needs the most in draws from the joint spread, and a need
// whose sd reaches twice the tolerance in ln flow (the square law) leaves
// the contenders outside the band with that probability. The greedy
// order takes, at each step, the reading that removes the most risk per
// minute. Ranking is our own construction from the linearised Gaussian
// update (the Kalman measurement update; the greedy choice is the usual one
// for submodular variance reduction).
func RankReadings(ctx context.Context, m *plant.Model, p plant.Params, plan *Plan, opt *ReadOptions) (*ReadPlan, error) {
	var o ReadOptions
	if opt != nil {
		o = *opt
	}
	def := func(v *float64, d float64) {
		if !(*v > 0) {
			*v = d
		}
	}
	def(&o.MeterSD, defaultMeterSD)
	def(&o.ClampSD, defaultClampSD)
	def(&o.PumpDiffSD, defaultPumpDiffSD)
	def(&o.MeterCost, defaultMeterCost)
	def(&o.ClampCost, defaultClampCost)
	def(&o.PumpCost, defaultPumpCost)
	switch {
	case o.ModelSD == 0:
		o.ModelSD = DefaultModelSD
	case o.ModelSD < 0:
		o.ModelSD = 0
	}
	rp := &ReadPlan{}
	if o.Uncertainty == nil {
		rp.Note = "no fit: the plan is from design, so every branch must be read after setting"
		return rp, nil
	}
	if plan == nil || len(plan.Needs) != len(m.Branches) {
		return nil, fmt.Errorf("rank readings: no plan for the model: %w", ErrInput)
	}
	sol, err := m.Solve(ctx, p, plan.State())
	if err != nil {
		return nil, fmt.Errorf("rank readings: %w: %w", err, ErrSolve)
	}
	n := len(m.Branches)
	target := make([]float64, n)
	for _, b := range plan.Branches {
		if i, ok := m.Index(b.ID); ok && !b.Riser {
			target[i] = b.Target
		}
	}
	tlo, thi := math.Log1p(plan.ToleranceLow), math.Log1p(plan.ToleranceHigh)
	pout := func(s float64) float64 {
		if !(s > 0) {
			return 0
		}
		return distuv.UnitNormal.CDF(tlo/s) + distuv.UnitNormal.Survival(thi/s)
	}

	// Every parameter's column of sensitivities.
	type col struct {
		par  uparam
		dlnq []float64
	}
	var cols []col
	if err := sensitivities(m, p, o.Uncertainty, sol, o.Workers, func(par uparam, dlnq []float64) error {
		cols = append(cols, col{par, append([]float64(nil), dlnq...)})
		return nil
	}); err != nil {
		return nil, err
	}
	if len(cols) == 0 {
		rp.Note = "the fit leaves nothing uncertain: no reading would change the plan"
		return rp, nil
	}
	// The readings' own sensitivities, in the state they are taken in.
	solR, colsR := sol, cols
	if o.ReadAt != nil {
		if solR, err = m.Solve(ctx, p, *o.ReadAt); err != nil {
			return nil, fmt.Errorf("rank readings: %w: %w", err, ErrSolve)
		}
		colsR = nil
		if err := sensitivities(m, p, o.Uncertainty, solR, o.Workers, func(par uparam, dlnq []float64) error {
			colsR = append(colsR, col{par, append([]float64(nil), dlnq...)})
			return nil
		}); err != nil {
			return nil, err
		}
		if len(colsR) != len(cols) {
			return nil, fmt.Errorf("rank readings: %d parameters in the state read, %d in the plan: %w", len(colsR), len(cols), ErrSolve)
		}
	}
	sd0 := make([]float64, n)
	for _, c := range cols {
		for i, d := range c.dlnq {
			sd0[i] += d * d * c.par.sigma * c.par.sigma
		}
	}
	for i := range sd0 {
		sd0[i] = math.Sqrt(sd0[i])
	}

	// The branches followed: the contenders for the index (largest chain
	// needs) and the terminals most likely outside the band.
	byNeed := make([]int, 0, n)
	for i := range n {
		if target[i] > 0 {
			byNeed = append(byNeed, i)
		}
	}
	byRisk := slices.Clone(byNeed)
	sort.SliceStable(byNeed, func(a, b int) bool { return plan.Needs[byNeed[a]].Chain > plan.Needs[byNeed[b]].Chain })
	sort.SliceStable(byRisk, func(a, b int) bool { return sd0[byRisk[a]] > sd0[byRisk[b]] })
	need := byNeed[:min(len(byNeed), maxNeedRows)]
	follow := slices.Clone(need)
	// The branches a reading decides come next: their risk is not in
	// their band.
	followed := make(map[int]bool, maxRankBranches)
	for _, i := range need {
		followed[i] = true
	}
	for i := range n {
		if i < len(o.Decides) && o.Decides[i] > 0 && target[i] > 0 && !followed[i] && len(follow) < maxRankBranches {
			follow = append(follow, i)
			followed[i] = true
		}
	}
	for _, i := range byRisk {
		if len(follow) >= maxRankBranches {
			break
		}
		if !followed[i] {
			follow = append(follow, i)
			followed[i] = true
		}
	}
	// Rows: each followed branch's flow after the plan (the risk's), its
	// valve meter and clamp-on readings in the state read, the total flow
	// and pump differential read, then the chain needs.
	nf := len(follow)
	rowFlow := func(k int) int { return k }
	rowMeter := func(k int) int { return nf + k }
	rowClamp := func(k int) int { return 2*nf + k }
	rowTotal, rowPump := 3*nf, 3*nf+1
	rowNeed := func(k int) int { return 3*nf + 2 + k }
	nr := 3*nf + 2 + len(need)
	top := m.Top()
	Q := solR.TotalFlow()
	pumpCurve := m.Site.Boundary.Kind == site.PumpCurve && m.Pump != nil
	var dlnPdlnQ float64
	pd := solR.PumpDiff()
	if pumpCurve && Q > 0 && pd > 0 {
		h := 1e-3
		d1 := -m.PumpHeadDrop(p, solR.State, Q*(1+h))
		d0 := -m.PumpHeadDrop(p, solR.State, Q*(1-h))
		dlnPdlnQ = (d1 - d0) / (2 * h) / pd
	}
	a := mat.NewDense(nr, len(cols), nil)
	for j, c := range cols {
		sg := c.par.sigma
		cr := colsR[j]
		for k, i := range follow {
			a.Set(rowFlow(k), j, sg*c.dlnq[i])
			a.Set(rowClamp(k), j, sg*cr.dlnq[i])
			v := cr.dlnq[i]
			if c.par.kind == KvParam && c.par.branch == i {
				v-- // the meter reads through the valve's table
			}
			a.Set(rowMeter(k), j, sg*v)
		}
		var t float64
		for _, i := range top {
			t += solR.Flow(i) * cr.dlnq[i]
		}
		if Q > 0 {
			t /= Q
		}
		a.Set(rowTotal, j, sg*t)
		if pumpCurve && pd > 0 {
			v := dlnPdlnQ * t
			if c.par.kind == PumpParam {
				v += -m.PumpHeadDrop(p, solR.State, Q) / pd
			}
			a.Set(rowPump, j, sg*v)
		}
		for k, i := range need {
			nd := plan.Needs[i]
			if !(nd.Chain > 0) {
				continue
			}
			var v float64
			switch {
			case c.par.kind == ResistanceParam && c.par.branch == i:
				v = nd.Fixed
			case c.par.kind == KvParam && c.par.branch == i:
				v = -2 * nd.OpenValve
			case c.par.kind == HeaderParam:
				v = max(nd.Chain-nd.Fixed-nd.OpenValve, 0)
			}
			a.Set(rowNeed(k), j, sg*v/nd.Chain)
		}
	}
	K := outerRows(a, nf, o.ReadAt == nil, o.Workers)
	// The model's own error of each branch's flow, shared by its flow
	// after the plan and its readings: what no parameter's spread holds.
	if f2 := o.ModelSD * o.ModelSD; f2 > 0 {
		for k := range follow {
			rows := []int{rowFlow(k), rowMeter(k), rowClamp(k)}
			for _, x := range rows {
				for _, y := range rows {
					K.Set(x, y, K.At(x, y)+f2)
				}
			}
		}
	}

	// Which branches may be the index: draws of the chain needs.
	w := make([]float64, len(need))
	if len(need) > 0 {
		lnc := make([]float64, len(need))
		for k, i := range need {
			lnc[k] = math.Log(max(plan.Needs[i].Chain, 1e-300))
		}
		rng := rand.New(rand.NewPCG(1, 2))
		z := make([]float64, len(cols))
		sub := a.Slice(rowNeed(0), nr, 0, len(cols))
		x := make([]float64, len(need))
		for range needDraws {
			for j := range z {
				z[j] = rng.NormFloat64()
			}
			xv := mat.NewVecDense(len(need), x)
			xv.MulVec(sub, mat.NewVecDense(len(z), z))
			best := 0
			for k := range need {
				if lnc[k]+x[k] > lnc[best]+x[best] {
					best = k
				}
			}
			w[best]++
		}
		for k := range w {
			w[k] /= needDraws
		}
	}
	var contenders []int
	for k := range need {
		if w[k] >= indexWeight {
			contenders = append(contenders, k)
		}
	}
	sort.SliceStable(contenders, func(x, y int) bool { return w[contenders[x]] > w[contenders[y]] })
	for _, k := range contenders {
		rp.Contenders = append(rp.Contenders, m.Branches[need[k]].ID)
	}
	nContend := float64(max(len(contenders), 1))
	// needVar is the variance of the weighted (linearised) need.
	needVar := func(get func(r, c int) float64) float64 {
		var v float64
		for x := range need {
			for y := range need {
				v += w[x] * w[y] * get(rowNeed(x), rowNeed(y))
			}
		}
		return v
	}
	// What no trim can recover: a branch short by more than the headroom
	// its valve fully open and the pump at its most leave it (the plan's
	// need for it, Need.Chain, against what the pump can give) stays out
	// of the tolerance however well it is known. That share of its risk,
	// at its spread now, no reading removes.
	floor := unrecoverable(m, plan, follow, tlo, func(k int) float64 { return math.Sqrt(max(K.At(rowFlow(k), rowFlow(k)), 0)) })
	risk := func(varOf func(r int) float64, nv float64) float64 {
		var r float64
		for k := range follow {
			r += max(pout(math.Sqrt(max(varOf(rowFlow(k)), 0))), floor[k])
		}
		return r + nContend*pout(math.Sqrt(max(nv, 0))/2)
	}
	cur := func() float64 {
		return risk(func(r int) float64 { return K.At(r, r) }, needVar(K.At))
	}
	// What a first reading of each followed branch decides beyond its
	// band (Decides), removed once the branch is read either way.
	extra := make([]float64, len(follow))
	var extraLeft float64
	for k, i := range follow {
		if i < len(o.Decides) && o.Decides[i] > 0 {
			extra[k] = o.Decides[i]
			extraLeft += extra[k]
		}
	}
	rp.Risk = cur() + extraLeft
	rp.NeedSD = math.Sqrt(max(needVar(K.At), 0))

	type cand struct {
		how  ReadKind
		k    int   // followed branch (-1: pump)
		rows []int // rows observed
		r    []float64
		cost float64
		done bool
	}
	var cands []cand
	for k, i := range follow {
		if m.Branches[i].Valve != nil {
			cands = append(cands, cand{how: ByValveMeter, k: k, rows: []int{rowMeter(k)}, r: []float64{o.MeterSD * o.MeterSD}, cost: o.MeterCost})
		}
		cands = append(cands, cand{how: ByClampOn, k: k, rows: []int{rowClamp(k)}, r: []float64{o.ClampSD * o.ClampSD}, cost: o.ClampCost})
	}
	pc := cand{how: AtPump, k: -1, rows: []int{rowTotal}, r: []float64{o.ClampSD * o.ClampSD}, cost: o.PumpCost}
	if pumpCurve {
		pc.rows, pc.r = append(pc.rows, rowPump), append(pc.r, o.PumpDiffSD*o.PumpDiffSD)
	}
	cands = append(cands, pc)
	start := mat.DenseCopyOf(K)
	// From here on only K's upper triangle is kept (observe updates it
	// alone, half the work); ka reads K either way round. K is symmetric
	// to the bit (a SymDense's copy, the model error added to both
	// halves) and each update keeps it so, since col[x]*col[y] is
	// col[y]*col[x]: the values read are the ones the full update gave.
	//
	// Read in the plan's state, a branch's clamp-on row is its flow row
	// (outerRows; the model error is added to both alike), and the
	// updates keep it so: the clamp-on rows, [lo, hi), are not updated
	// and ka reads the flow rows for them.
	lo, hi := nr, nr
	if o.ReadAt == nil {
		lo, hi = rowClamp(0), rowClamp(0)+nf
	}
	ka := func(x, y int) float64 {
		if x >= lo && x < hi {
			x -= 2 * nf
		}
		if y >= lo && y < hi {
			y -= 2 * nf
		}
		if x > y {
			x, y = y, x
		}
		return K.At(x, y)
	}

	// wK is the covariance of the linearised need with every row.
	wK := make([]float64, nr)
	folded := func() {
		for x := range nr {
			var v float64
			for y := range need {
				v += w[y] * ka(x, rowNeed(y))
			}
			wK[x] = v
		}
	}
	folded()
	// after returns the risk once c's rows are observed: the flows'
	// variances and the need's fall by the rank-one updates, one row at a
	// time, each row's covariances with the later rows updated as it goes.
	// nvNow is needVar(ka) for K as it stands: the same for every
	// candidate of a round, so worked out once a round.
	var nvNow float64
	// scratch is one scorer's: the flows' variances and the rows' terms.
	type scratch struct {
		diag []float64
		f    [][]float64
	}
	newScratch := func() *scratch {
		sc := &scratch{diag: make([]float64, nf), f: make([][]float64, 2)}
		for q := range sc.f {
			sc.f[q] = make([]float64, nf)
		}
		return sc
	}
	own := newScratch()
	after := func(c *cand, sc *scratch) float64 {
		diag, f := sc.diag, sc.f
		for k := range nf {
			diag[k] = K.At(rowFlow(k), rowFlow(k))
		}
		nv := nvNow
		nq := len(c.rows)
		g := make([]float64, nq)
		h := make([][]float64, nq)
		for q, o := range c.rows {
			for k := range nf {
				f[q][k] = ka(rowFlow(k), o)
			}
			g[q] = wK[o]
			h[q] = make([]float64, nq)
			for q2, o2 := range c.rows {
				h[q][q2] = ka(o, o2)
			}
		}
		for q := range nq {
			d := h[q][q] + c.r[q]
			if !(d > 0) {
				continue
			}
			for k := range nf {
				diag[k] -= f[q][k] * f[q][k] / d
			}
			nv -= g[q] * g[q] / d
			for q2 := q + 1; q2 < nq; q2++ {
				e := h[q][q2] / d
				for k := range nf {
					f[q2][k] -= f[q][k] * e
				}
				g[q2] -= g[q] * e
				for q3 := q + 1; q3 < nq; q3++ {
					h[q2][q3] -= h[q][q2] * h[q][q3] / d
				}
			}
		}
		return risk(func(r int) float64 { return diag[r] }, nv)
	}
	observe := func(c *cand) {
		for q, row := range c.rows {
			d := ka(row, row) + c.r[q]
			if !(d > 0) {
				continue
			}
			col := make([]float64, nr)
			for x := range nr {
				col[x] = ka(x, row)
			}
			// On K's rows directly: At and Set cost more than the
			// update itself (nr is about 900 at 1,000 branches). The
			// same operations as K.Set(x, y, K.At(x, y)-col[x]*col[y]/d),
			// so the same bits, on the upper triangle less the
			// clamp-on rows and columns. Each row's update reads col
			// alone and writes its own row, so the rows are shared out.
			upd := func(kr, col []float64, cx float64) {
				for y, cy := range col {
					kr[y] -= cx * cy / d
				}
			}
			parallelRows(o.Workers, nr, func(x int) {
				if x >= lo && x < hi {
					return
				}
				kr := K.RawRowView(x)
				if x < lo {
					upd(kr[x:lo], col[x:lo], col[x])
					upd(kr[hi:nr], col[hi:nr], col[x])
				} else {
					upd(kr[x:nr], col[x:nr], col[x])
				}
			})
		}
		folded()
		nvNow = needVar(ka)
	}
	nvNow = needVar(ka)
	now := rp.Risk - extraLeft
	// Lazy greedy (Minoux, "Accelerated greedy algorithms for maximizing
	// submodular set functions", 1978): a reading lowers the variances the
	// others would lower, so what a candidate removed last round bounds
	// what it removes now; each round re-scores candidates from the highest
	// bound down and stops once the best fresh score is above every bound
	// left. The full greedy scored every candidate every round, on 500
	// branches 2 s of a 2.5 s run.
	bound := make([]float64, len(cands))
	for ci := range bound {
		bound[ci] = math.Inf(1)
	}
	order := make([]int, len(cands))
	for ci := range order {
		order[ci] = ci
	}
	// The first round scores every candidate (every bound is infinite):
	// those scores are independent, so they are shared out among the
	// workers, each with its own scratch.
	first := make([]float64, len(cands))
	workers := min(parallel.Workers(o.Workers), len(cands))
	scratches := []*scratch{own}
	for len(scratches) < workers {
		scratches = append(scratches, newScratch())
	}
	parallel.For(workers, len(cands), func(w, ci int) {
		first[ci] = after(&cands[ci], scratches[w])
	})
	round := 0
	for o.Max == 0 || len(rp.Readings) < o.Max {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		sort.SliceStable(order, func(a, b int) bool { return bound[order[a]] > bound[order[b]] })
		best, bestScore, bestRisk := -1, 0.0, now
		for _, ci := range order {
			c := &cands[ci]
			if c.done {
				continue
			}
			if best >= 0 && bestScore >= bound[ci] {
				break
			}
			var r float64
			if round == 0 {
				r = first[ci]
			} else {
				r = after(c, own)
			}
			var ex float64
			if c.k >= 0 {
				ex = extra[c.k]
			}
			sc := (now - r + ex) / c.cost
			bound[ci] = sc
			if sc > bestScore {
				best, bestScore, bestRisk = ci, sc, r
			}
		}
		if best < 0 {
			break
		}
		c := &cands[best]
		var ex float64
		if c.k >= 0 {
			ex = extra[c.k]
		}
		if !(now-bestRisk+ex > 1e-9) {
			break
		}
		c.done = true
		rd := describe(m, sol, solR, plan, c.how, c.k, follow, need, w, contenders, start, c.rows, c.r, now-bestRisk+ex, c.cost, pout, pd)
		if ex > 0 {
			if i := follow[c.k]; i < len(o.DecidesWhy) && o.DecidesWhy[i] != "" {
				rd.Settles = o.DecidesWhy[i] + "; " + rd.Settles
			}
			extra[c.k] = 0
			extraLeft -= ex
		}
		rp.Readings = append(rp.Readings, rd)
		observe(c)
		now = bestRisk
		round++
	}
	rp.RiskAfter = now + extraLeft
	return rp, nil
}

// unrecoverable is, for each followed branch, the probability that its
// ln flow after the plan, normal about the plan's with the spread sd(k),
// falls more than the tolerance's low edge (tlo, a ln) below target beyond
// its headroom: half the ln of what the pump can give at most (Plan.Pump's
// Available, less an open circuit's lift) over what its chain needs at
// target with its valves fully open (Need.Chain). Zero where the pump's
// most is not known (no curve: an ideal source) or the need is not.
func unrecoverable(m *plant.Model, plan *Plan, follow []int, tlo float64, sd func(k int) float64) []float64 {
	out := make([]float64, len(follow))
	avail := plan.Pump.Available - m.Lift()
	if !(avail > 0) || math.IsInf(avail, 1) {
		return out
	}
	for k, i := range follow {
		s, need := sd(k), plan.Needs[i].Chain
		if !(s > 0) || !(need > 0) {
			continue
		}
		h := 0.5 * math.Log(avail/need)
		out[k] = distuv.UnitNormal.CDF((tlo - h) / s)
	}
	return out
}

// describe fills a Candidate: what to expect, its band from the spread
// before any reading (start), and what it settles.
func describe(m *plant.Model, sol, solR *plant.Solved, plan *Plan, how ReadKind, k int, follow, need []int, w []float64, contenders []int, start *mat.Dense, rows []int, r []float64, gain, cost float64, pout func(float64) float64, pd float64) Candidate {
	c := Candidate{How: how, Index: -1, Where: "pump", Gain: gain, Minutes: cost}
	if how == AtPump {
		c.Expect, c.Quantity = pd, site.PumpDiff
		last := len(rows) - 1
		sd := math.Sqrt(start.At(rows[last], rows[last]) + r[last])
		if len(rows) < 2 {
			c.Expect, c.Quantity = solR.TotalFlow(), site.TotalFlow
		}
		c.Low, c.High = c.Expect*math.Exp(-2*sd), c.Expect*math.Exp(2*sd)
		c.Settles = "the pump's head and the circuit's total flow: narrows every branch's band through the pump and headers"
		return c
	}
	i := follow[k]
	b := &m.Branches[i]
	c.Where, c.Index, c.Quantity = b.ID, i, site.Flow
	q := solR.Flow(i)
	if how == ByValveMeter && solR.Params.KvScale[i] > 0 {
		q /= solR.Params.KvScale[i] // the table's reading of the true flow
	}
	// The band the reading should fall in: the flow's spread and the
	// instrument's own.
	sd := math.Sqrt(start.At(rows[0], rows[0]) + r[0])
	c.Expect, c.Low, c.High = q, q*math.Exp(-2*sd), q*math.Exp(2*sd)
	var why []string
	if kn := slices.Index(need, i); kn >= 0 && slices.Contains(contenders, kn) && len(contenders) > 1 {
		if b.ID == plan.Index {
			why = append(why, fmt.Sprintf("the index circuit, needing the most in %.0f %% of the model's draws: its reading decides what the pump must give", 100*w[kn]))
		} else {
			why = append(why, fmt.Sprintf("may be the index circuit instead of %s (needs the most in %.0f %% of the model's draws): its reading decides which, and what the pump must give", plan.Index, 100*w[kn]))
		}
	} else if b.ID == plan.Index {
		why = append(why, "the index circuit: proves the pump gives enough")
	}
	sdf := math.Sqrt(start.At(k, k))
	if p := pout(sdf); p > 0.01 {
		why = append(why, fmt.Sprintf("its flow may be outside the tolerance (%.0f %% chance; band %.0f to %.0f %% of target)", 100*p, 100*math.Exp(-2*sdf)*sol.Flow(i)/b.Target, 100*math.Exp(2*sdf)*sol.Flow(i)/b.Target))
	}
	if len(why) == 0 {
		why = append(why, "narrows the bands of the branches it shares the headers and pump with")
	}
	c.Settles = why[0]
	if len(why) > 1 {
		c.Settles += "; " + why[1]
	}
	return c
}

// outerRows returns a aᵀ as a dense matrix. When the readings are taken in
// the plan's state (same), a's clamp-on rows (nf of them, after the nf
// flow rows and nf meter rows) repeat its flow rows to the bit, so their
// products are those of the flow rows: a aᵀ is formed on the other rows
// alone (half the work at 1,000 branches) and spread. The dot product
// adds the same products in the same order whichever row comes first, so
// every entry has the bits the full product gives it. The rows are shared
// out among up to workers goroutines (0: one per processor); each entry is
// the same dot product whichever works it out.
func outerRows(a *mat.Dense, nf int, same bool, workers int) *mat.Dense {
	nr, nc := a.Dims()
	// phys maps a row of a to its row in the product formed.
	phys := make([]int, nr)
	var keep []int
	for x := range nr {
		switch {
		case same && nf > 0 && x >= 2*nf && x < 3*nf:
			phys[x] = x - 2*nf // the flow row it repeats
		default:
			phys[x] = len(keep)
			keep = append(keep, x)
		}
	}
	nk := len(keep)
	// The upper triangle of the kept rows' product, as gonum's Dsyrk
	// forms it for SymOuterK: entry (i, j) is 0·1 + 1·(a_i · a_j), the
	// dot product by floats.Dot (the same unrolled sum), which is the dot
	// product itself but that an exact -0 becomes +0.
	rs := make([]float64, nk*nk)
	rowsOf := func(x int) []float64 { return a.RawRowView(keep[x])[:nc] }
	parallelRows(workers, nk, func(i int) {
		ai := rowsOf(i)
		ri := rs[i*nk : (i+1)*nk]
		for j := i; j < nk; j++ {
			d := floats.Dot(ai, rowsOf(j))
			if d == 0 {
				d = 0
			}
			ri[j] = d
		}
	})
	K := mat.NewDense(nr, nr, nil)
	parallelRows(workers, nr, func(x int) {
		kr := K.RawRowView(x)[:nr]
		px := phys[x]
		for y := range nr {
			i, j := px, phys[y]
			if i > j {
				i, j = j, i
			}
			kr[y] = rs[i*nk+j]
		}
	})
	return K
}

// parallelRows calls f(0) ... f(n-1), each once, on up to workers
// goroutines (0: runtime.GOMAXPROCS(0)); f must write only what its row
// owns. Rows are handed out one at a time, so rows of unequal work (a
// triangle's) share out evenly.
func parallelRows(workers, n int, f func(i int)) {
	parallel.For(parallel.Workers(workers), n, func(_, i int) { f(i) })
}
