package calibrate

import (
	"context"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"

	"flowset/internal/hydraulics"
	"flowset/internal/lsq"
	"flowset/internal/network"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// ParamKind says what a fitted parameter multiplies.
type ParamKind int

// The parameter kinds. Every parameter is the natural logarithm of a
// multiplier that is 1 at design.
const (
	ResistanceParam ParamKind = iota // a branch's fixed parts
	KvParam                          // a branch's valve Kv, in every state
	StuckParam                       // a seized valve's one Kv, relative to the table at its first surveyed setting
	OffsetParam                      // a mis-set valve's offset from its recorded setting, in setting units (not a log)
	HeaderParam                      // every header segment
	PumpParam                        // the pump's head curve
	SetPointParam                    // the set point a riser's differential controller holds as found
)

// String names the kind.
func (k ParamKind) String() string {
	switch k {
	case ResistanceParam:
		return "resistance"
	case KvParam:
		return "kv scale"
	case StuckParam:
		return "seized kv"
	case OffsetParam:
		return "setting offset"
	case HeaderParam:
		return "header"
	case PumpParam:
		return "pump head"
	case SetPointParam:
		return "controller set point"
	}
	return fmt.Sprintf("param(%d)", int(k))
}

// Param is one fitted parameter: the log of a multiplier, or for
// OffsetParam a setting offset in the valve's units.
type Param struct {
	Kind   ParamKind
	Branch int // branch index; -1 for the header and pump
	// Sigma is the prior sd (+Inf: none).
	Sigma float64
	free  bool // freed by a valve hypothesis
}

// obs is one observation of the fit: a reading, or a valve-meter flow
// turned back into the valve differential the meter measured.
type obs struct {
	reading int // index into Site.Readings
	state   int
	what    site.Quantity // what is modelled (ValveDiff for a valve-meter flow)
	branch  int           // -1 for the pump, header and total flow
	pump    int           // one pump of several (PumpIndex); -1 for the set or none
	value   float64       // SI, of what
	sigma   float64
	meter   bool    // a valve-meter flow
	meterKv float64 // the table Kv at the recorded setting the meter used, m3/h
	meterC  float64 // the meter's conversion dp = meterC·q|q|
	// modelSD is the header model's part of sigma (a branch differential,
	// FitOptions.HeaderModel), in the reading's unit; 0 for none.
	modelSD float64
}

type term struct {
	i int
	c float64
}

// lin is an observation's linearisation: coefficients on the link flows,
// node pressures and (directly) on the parameters.
type lin struct {
	q, p, x []term
}

// apply is the functional's value at the link flow changes dq, the node
// pressure changes dp and the parameter changes x (flows, then pressures,
// then parameters: every product sums in this one order).
func (l *lin) apply(dq, dp, x []float64) float64 {
	var s float64
	for _, t := range l.q {
		s += t.c * dq[t.i]
	}
	for _, t := range l.p {
		s += t.c * dp[t.i]
	}
	for _, t := range l.x {
		s += t.c * x[t.i]
	}
	return s
}

// stateNet is one survey state's network, kept between evaluations so that
// its node ordering is reused and each solve starts warm from the last.
type stateNet struct {
	st     plant.State
	built  *network.Built
	obs    []int // indices into problem.obs
	flowOf [][]int
	// supplyHdr and returnHdr are each branch's header links (-1 none).
	supplyHdr, returnHdr []int
	top, ret             int // header top node and the pressurisation point
	outlet               int // pump outlet node (-1 without a pump)
	topFlow              []int
	sol                  *network.Solution
	params               plant.Params
	dh                   [][]term // per parameter, the link-drop derivatives
	lin                  []lin    // parallel to obs
	// bufL and bufN are scratch vectors over links and nodes for the
	// matrix-free products.
	bufL, bufN []float64
	// outL, outN and outX receive the products' sensitivities (links,
	// nodes, unknown pressures), so a CG iteration allocates nothing.
	outL, outN, outX []float64
	// multi holds the scratch and result vectors of MulVecs and
	// MulTransVecs, one set per vector of a batch (see stateNet.set).
	multi []vecSet
	// kvGain is d(ln KvScale_i)/dx_j of each branch's valve parameter.
	kvGain []float64
	local  *localNet // for ApproxJacobian, built on first use
	th     *thevenin // set in a reduced refit (runReduced)
	valves []valveElem
	// applied holds the multipliers whose elements are on the network
	// (nil Resistance: none yet).
	applied plant.Params
}

// scratch returns sn's zeroed scratch vectors.
func (sn *stateNet) scratch() (links, nodes []float64) {
	nl, nn := len(sn.sol.Flow), len(sn.sol.Pressure)
	if len(sn.bufL) != nl || len(sn.bufN) != nn {
		sn.bufL, sn.bufN = make([]float64, nl), make([]float64, nn)
	}
	clear(sn.bufL)
	clear(sn.bufN)
	return sn.bufL, sn.bufN
}

// outputs returns sn's vectors for a product's result (links, nodes) and
// the solve's scratch; their contents are overwritten.
func (sn *stateNet) outputs() (links, nodes, x []float64) {
	nl, nn := len(sn.sol.Flow), len(sn.sol.Pressure)
	if len(sn.outL) != nl || len(sn.outN) != nn {
		sn.outL, sn.outN, sn.outX = make([]float64, nl), make([]float64, nn), make([]float64, nn)
	}
	return sn.outL, sn.outN, sn.outX
}

// vecSet is one vector's scratch (bufL, bufN) and results (outL, outN,
// outX) in a batch of products, as stateNet keeps for one.
type vecSet struct{ bufL, bufN, outL, outN, outX []float64 }

// sets returns k sets of sn's batch vectors, the scratch ones cleared.
func (sn *stateNet) sets(k int) []vecSet {
	nl, nn := len(sn.sol.Flow), len(sn.sol.Pressure)
	for len(sn.multi) < k {
		sn.multi = append(sn.multi, vecSet{})
	}
	for q := range k {
		v := &sn.multi[q]
		if len(v.bufL) != nl || len(v.bufN) != nn {
			*v = vecSet{make([]float64, nl), make([]float64, nn), make([]float64, nl), make([]float64, nn), make([]float64, nn)}
		}
		clear(v.bufL)
		clear(v.bufN)
	}
	return sn.multi[:k]
}

// problem is the calibration least-squares problem for the engine.
type problem struct {
	// ctx is kept because the engine's Problem interface carries none; it
	// only lets a long network solve stop early.
	ctx    context.Context
	m      *plant.Model
	params []Param
	obs    []obs
	states []*stateNet
	rIdx   []int // branch -> resistance parameter, -1
	kvIdx  []int // branch -> Kv or stuck parameter, -1
	spIdx  []int // branch -> controller set point parameter, -1 (nil: none)
	hIdx   int
	pIdx   int
	refKv  []float64 // table Kv of each valve at its reference setting
	pred   []float64 // predictions at the latest evaluation
	x      []float64 // the latest evaluation point
	ok     bool      // the latest evaluation completed
	prev   evalCache
	solves int // network solves
	// workers is the number of goroutines of ApproxJacobian (FitOptions.Workers).
	workers int
	// approx holds ApproxJacobian's last entries, whose arrays it reuses.
	approx struct {
		rows, cols []int
		vals       []float64
	}
	// base, when set, holds per state the multipliers of the parameters
	// this problem does not fit (a local refit); nil means design.
	base []plant.Params
}

// restrict keeps only branch i's parameters and holds every other one at
// its value in fit f, state by state.
func (p *problem) restrict(i int, f *fitRun) {
	p.base = make([]plant.Params, len(p.states))
	for s := range p.states {
		p.base[s] = f.prob.stateParams(f.res.X, s, nil)
	}
	var keep []Param
	for _, par := range p.params {
		if par.Branch == i {
			keep = append(keep, par)
		}
	}
	p.params = keep
	for b := range p.rIdx {
		p.rIdx[b], p.kvIdx[b] = -1, -1
	}
	for b := range p.spIdx {
		p.spIdx[b] = -1
	}
	p.hIdx, p.pIdx = -1, -1
	for j, par := range p.params {
		switch par.Kind {
		case ResistanceParam:
			p.rIdx[par.Branch] = j
		case KvParam, StuckParam, OffsetParam:
			p.kvIdx[par.Branch] = j
		case SetPointParam:
			p.spIdx[par.Branch] = j
		}
	}
}

// maxLog bounds the log-multipliers the model is evaluated at: e^±30 is
// far outside anything physical and keeps the network finite.
const maxLog = 30

func (p *problem) Dims() (int, int) { return len(p.params), len(p.obs) }

// stateParams returns the multipliers the network of state s is built
// with, and fills gain with d(ln KvScale_i)/dx_j for each valve parameter j
// of branch i (nil gain: not wanted).
func (p *problem) stateParams(x []float64, s int, gain []float64) plant.Params {
	var pp plant.Params
	if p.base != nil {
		pp = p.base[s].Clone()
	} else {
		pp = p.m.Design()
	}
	for i := range p.m.Branches {
		if j := p.rIdx[i]; j >= 0 {
			pp.Resistance[i] = math.Exp(x[j])
		}
		j := p.kvIdx[i]
		if j < 0 {
			continue
		}
		k, g := math.Exp(x[j]), 1.0
		b := &p.m.Branches[i]
		rec := p.states[s].st.Settings[i]
		switch p.params[j].Kind {
		case StuckParam:
			// One Kv in every state: the scale on the table at this
			// state's setting that gives the reference Kv times e^x.
			if kv, err := b.Valve.KvAt(rec); err == nil && kv > 0 {
				k *= p.refKv[i] / kv
			}
		case OffsetParam:
			// The valve sits x away from the recorded setting (within its
			// range): its table Kv there over the table Kv recorded.
			k, g = 1, 0
			lo, hi := b.Valve.Range()
			at := rec + x[j]
			set := min(max(at, lo), hi)
			kv, slope, err := kvSlope(b, set)
			kr, err2 := b.Valve.KvAt(rec)
			if err == nil && err2 == nil && kv > 0 && kr > 0 {
				k = kv / kr
				if at >= lo && at <= hi {
					g = slope / kv
				}
			}
		}
		pp.KvScale[i] = k
		if gain != nil {
			gain[i] = g
		}
	}
	for i, j := range p.spIdx {
		if j < 0 {
			continue
		}
		if pp.SetPoint == nil {
			pp.SetPoint = make([]float64, len(p.m.Branches))
			for k := range pp.SetPoint {
				pp.SetPoint[k] = 1
			}
		}
		pp.SetPoint[i] = math.Exp(x[j])
	}
	if p.hIdx >= 0 {
		pp.Header = math.Exp(x[p.hIdx])
	}
	if p.pIdx >= 0 {
		pp.PumpHead = math.Exp(x[p.pIdx])
	}
	return pp
}

// kvSlope returns branch b's valve Kv at a setting and its derivative.
func kvSlope(b *plant.Branch, set float64) (kv, slope float64, err error) {
	if ks, ok := b.Valve.(interface {
		KvSlope(float64) (float64, float64, error)
	}); ok {
		return ks.KvSlope(set)
	}
	// plant presents a generic characteristic in % of travel without its
	// slope: rebuild it from the valve model.
	vm := b.ValveModel
	if vm == nil {
		return 0, 0, fmt.Errorf("valve of branch %q has no model: %w", b.ID, ErrSurvey)
	}
	kinds := map[string]hydraulics.Kind{"linear": hydraulics.Linear, "equal-percentage": hydraulics.EqualPercentage, "quick-opening": hydraulics.QuickOpening}
	kind, ok := kinds[vm.Characteristic]
	if !ok {
		return 0, 0, fmt.Errorf("valve %q: unknown characteristic %q: %w", vm.Name, vm.Characteristic, ErrSurvey)
	}
	kv, slope, err = hydraulics.Inherent{Kind: kind, Kvs: vm.Kvs, Rangeability: vm.Rangeability}.KvSlope(set / 100)
	return kv, slope / 100, err
}

// setElements puts the elements of multipliers pp on state s's network.
func (p *problem) setElements(sn *stateNet, pp plant.Params) {
	net := sn.built.Net
	// Only what changed since the last call: on a large site a step moves
	// every resistance, but the valves' Kv scales, the header and the pump
	// mostly stay, and building their elements is not free.
	old, ok := sn.applied, sn.applied.Resistance != nil
	hdr := !ok || old.Header != pp.Header
	moved := hdr || !slices.Equal(old.SetPoint, pp.SetPoint)
	for i := range p.m.Branches {
		b := &p.m.Branches[i]
		if !ok || old.Resistance[i] != pp.Resistance[i] || old.KvScale[i] != pp.KvScale[i] {
			moved = true
		}
		if l := sn.built.Branch[b.ID]; l >= 0 && (!ok || old.Resistance[i] != pp.Resistance[i] || old.KvScale[i] != pp.KvScale[i]) {
			var es []hydraulics.Element
			if f := p.m.FixedIn(i, pp.Resistance[i], sn.st); f != nil {
				es = append(es, f)
			}
			if b.HasValve() {
				es = append(es, sn.valveAt(p.m, i, pp.KvScale[i]))
			}
			if sn.st.Bypassed(i) {
				es = append(es, p.m.BypassElement(i, b.BypassAsFound))
			}
			net.SetElements(l, es...)
		}
		if !hdr {
			continue
		}
		if l := sn.supplyHdr[i]; l >= 0 {
			net.SetElements(l, scaled(b.Supply, pp.Header)...)
		}
		if l := sn.returnHdr[i]; l >= 0 {
			net.SetElements(l, scaled(b.Return, pp.Header)...)
		}
	}
	if l := sn.built.PumpLink; l >= 0 && (!ok || old.PumpHead != pp.PumpHead) {
		net.SetElements(l, p.m.Source(pp, sn.st).PumpElements()...)
	}
	if moved && len(sn.built.Controller) > 0 {
		p.setControllers(sn, pp)
	}
	sn.applied = pp
}

func scaled(es []hydraulics.Element, f float64) []hydraulics.Element {
	if f == 1 {
		return es
	}
	out := make([]hydraulics.Element, len(es))
	for i, e := range es {
		out[i] = hydraulics.Scaled{E: e, Factor: f}
	}
	return out
}

// solve brings state s's network to multipliers pp.
func (p *problem) solve(sn *stateNet, pp plant.Params) error {
	p.setElements(sn, pp)
	var opt *network.Options
	if sn.sol != nil {
		opt = &network.Options{Initial: sn.sol.Flow}
	}
	p.solves++
	sol, err := sn.built.Net.Solve(p.ctx, opt)
	if err != nil && opt != nil && p.ctx.Err() == nil {
		// A warm start from far away can fail where a cold one does not.
		p.solves++
		sol, err = sn.built.Net.Solve(p.ctx, nil)
	}
	if err != nil {
		return fmt.Errorf("state %q: %w: %w", sn.st.Label, err, lsq.ErrDomain)
	}
	sn.sol, sn.params = sol, pp
	return nil
}

// Residuals implements Problem.
func (p *problem) Residuals(x, r []float64, jac *mat.Dense) (err error) {
	for j, v := range x {
		if !finite(v) || p.params[j].Kind != OffsetParam && math.Abs(v) > maxLog {
			return fmt.Errorf("%v parameter %g beyond ±%d: %w", p.params[j].Kind, v, maxLog, lsq.ErrDomain)
		}
	}
	if jac == nil && (p.ok && slices.Equal(x, p.x) || p.prev.ok && slices.Equal(x, p.prev.x)) {
		// Back to the point before the latest (a rejected trial): its
		// solutions and linearisations are kept.
		if !slices.Equal(x, p.x) {
			p.swapPrev()
		}
		for oi, o := range p.obs {
			r[oi] = (p.pred[oi] - o.value) / o.sigma
		}
		return nil
	}
	p.swapPrev()
	p.ok = false
	// A failed evaluation leaves the latest good one current: the engine
	// takes the failure as a rejected trial and goes on from the point
	// before, whose linearisation the operator products (opProblem) read
	// without evaluating it again. Left half done, a state solved at the
	// point before but not linearised crashed them (an independent
	// 200-branch plant with a check state: the products indexed a
	// linearisation of none).
	defer func() {
		if err != nil && p.prev.ok {
			p.swapPrev()
			p.prev.ok = false
		}
	}()
	p.x = append(p.x[:0], x...)
	if len(p.pred) != len(p.obs) {
		p.pred = make([]float64, len(p.obs))
	}
	for s, sn := range p.states {
		if latest := p.prev.st[s].sol; latest != nil {
			sn.sol = latest // to start from
		}
	}
	if jac != nil {
		jac.Zero()
	}
	for s, sn := range p.states {
		if len(sn.obs) == 0 {
			continue
		}
		if len(sn.kvGain) != len(p.m.Branches) {
			sn.kvGain = make([]float64, len(p.m.Branches))
		}
		pp := p.stateParams(x, s, sn.kvGain)
		solve := p.solve
		if sn.th != nil {
			solve = p.solveReduced
		}
		if err := solve(sn, pp); err != nil {
			return err
		}
		p.linearise(sn)
		for _, oi := range sn.obs {
			o := &p.obs[oi]
			p.pred[oi] = p.predict(sn, o)
			r[oi] = (p.pred[oi] - o.value) / o.sigma
			if !finite(r[oi]) {
				return fmt.Errorf("reading %d predicted %g: %w", o.reading, p.pred[oi], lsq.ErrDomain)
			}
		}
		switch {
		case jac == nil:
		case sn.th != nil:
			p.jacobianReduced(sn, jac)
		default:
			if err := p.jacobian(sn, jac); err != nil {
				return err
			}
		}
	}
	p.ok = true
	return nil
}

// stateEval is what an evaluation leaves on a state.
type stateEval struct {
	sol    *network.Solution
	params plant.Params
	lin    []lin
	dh     [][]term
	kvGain []float64
}

// evalCache is the evaluation before the latest, kept because the engine
// returns to it after every rejected trial.
type evalCache struct {
	ok      bool
	x, pred []float64
	st      []stateEval
}

// swapPrev exchanges the latest evaluation with the one before.
func (p *problem) swapPrev() {
	c := &p.prev
	if len(c.st) != len(p.states) {
		c.st = make([]stateEval, len(p.states))
	}
	c.ok, p.ok = p.ok, c.ok
	c.x, p.x = p.x, c.x
	c.pred, p.pred = p.pred, c.pred
	for s, sn := range p.states {
		e := &c.st[s]
		e.sol, sn.sol = sn.sol, e.sol
		e.params, sn.params = sn.params, e.params
		e.lin, sn.lin = sn.lin, e.lin
		e.dh, sn.dh = sn.dh, e.dh
		e.kvGain, sn.kvGain = sn.kvGain, e.kvGain
	}
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// valveDrop returns the drop and slope of branch i's valve at flow q in the
// state's solution.
func (p *problem) valveDrop(sn *stateNet, i int, q float64) (dp, slope float64) {
	return sn.valve(p.m, i).Drop(q, p.m.Fluid)
}

// scaleDrop returns d(drop)/d(ln KvScale) of branch i's valve at flow q in
// the state's solution: -2 dp for a Kv law, the valve's own for a
// pressure-independent one (hydraulics.PressureIndependent.ScaleDrop).
func (p *problem) scaleDrop(sn *stateNet, i int, q float64) float64 {
	e := sn.valve(p.m, i)
	if v, ok := e.(hydraulics.PressureIndependent); ok {
		return v.ScaleDrop(q, p.m.Fluid)
	}
	dp, _ := e.Drop(q, p.m.Fluid)
	return -2 * dp
}

// valveElem is a branch's valve element at one Kv scale.
type valveElem struct {
	scale float64
	e     hydraulics.Element
}

// valve returns branch i's valve element at the state's setting and
// multipliers, kept between evaluations until its Kv scale changes: most
// valves keep theirs throughout a local refit, and building one looks its
// table up.
func (sn *stateNet) valve(m *plant.Model, i int) hydraulics.Element {
	return sn.valveAt(m, i, sn.params.KvScale[i])
}

// valveAt is valve at Kv scale k.
func (sn *stateNet) valveAt(m *plant.Model, i int, k float64) hydraulics.Element {
	if len(sn.valves) != len(m.Branches) {
		sn.valves = make([]valveElem, len(m.Branches))
	}
	if c := &sn.valves[i]; c.e != nil && c.scale == k {
		return c.e
	}
	e := m.ValveElement(i, sn.st.Settings[i], k)
	sn.valves[i] = valveElem{k, e}
	return e
}

func (p *problem) flow(sn *stateNet, links []int) float64 {
	var q float64
	for _, l := range links {
		q += sn.sol.Flow[l]
	}
	return q
}

func (p *problem) predict(sn *stateNet, o *obs) float64 {
	sol := sn.sol
	if o.pump >= 0 {
		if l := sn.built.PumpLink; l >= 0 && sn.outlet >= 0 {
			return p.onePump(sn, o, sol.Flow[l], sol.Pressure[sn.outlet]-sol.Pressure[sn.ret]+p.m.Lift(), sn.params.PumpHead)
		}
		return math.NaN()
	}
	switch o.what {
	case site.Flow:
		return p.flow(sn, sn.flowOf[o.branch])
	case site.TotalFlow:
		return p.flow(sn, sn.topFlow)
	case site.BranchDiff:
		id := p.m.Branches[o.branch].ID
		return sol.Pressure[sn.built.SupplyNode[id]] - sol.Pressure[sn.built.ReturnNode[id]]
	case site.ControlledDiff:
		d, ok := sn.built.ControlledDiff(p.m.Branches[o.branch].ID, sol)
		if !ok {
			return math.NaN()
		}
		return d
	case site.HeaderDiff:
		return sol.Pressure[sn.top] - sol.Pressure[sn.ret]
	case site.PumpDiff:
		if sn.outlet < 0 {
			return sn.st.Differential
		}
		// The pump gives the static lift of an open circuit besides the
		// friction its outlet node sees.
		return sol.Pressure[sn.outlet] - sol.Pressure[sn.ret] + p.m.Lift()
	case site.ValveDiff:
		dp, _ := p.valveDrop(sn, o.branch, p.flow(sn, sn.flowOf[o.branch]))
		return dp
	case site.Speed:
		v, _, _, _ := p.speed(sn)
		return v
	}
	return math.NaN()
}

// onePump is a reading at one pump of several as a function of the set's
// flow q, its differential dp and the head multiplier k (plant.PumpReading).
func (p *problem) onePump(sn *stateNet, o *obs, q, dp, k float64) float64 {
	return p.m.PumpReading(o.what, o.pump, sn.st, k, q, dp)
}

// onePumpLin returns onePump and its derivatives in q, dp and ln k, by
// central differences: the set's combined curve is found by iteration, and
// its value is smooth away from a pump's cut-in.
func (p *problem) onePumpLin(sn *stateNet, o *obs, q, dp, k float64) (v, dq, ddp, dk float64) {
	v = p.onePump(sn, o, q, dp, k)
	hq, hp, hk := 1e-6*max(math.Abs(q), 1e-9), 1e-6*max(math.Abs(dp), 1), 1e-6
	dq = (p.onePump(sn, o, q+hq, dp, k) - p.onePump(sn, o, q-hq, dp, k)) / (2 * hq)
	ddp = (p.onePump(sn, o, q, dp+hp, k) - p.onePump(sn, o, q, dp-hp, k)) / (2 * hp)
	dk = (p.onePump(sn, o, q, dp, k*math.Exp(hk)) - p.onePump(sn, o, q, dp, k*math.Exp(-hk))) / (2 * hk)
	return v, dq, ddp, dk
}

// speed returns the pump's speed ratio in state sn and its derivatives with
// respect to the pump flow, the pump differential and ln PumpHead: the
// state's speed on a pump boundary (no derivatives), the speed at which the
// curve gives the differential at the flow while a drive holds its set
// point, its maximum once it cannot (no derivatives).
func (p *problem) speed(sn *stateNet) (v, dq, ddp, dk float64) {
	m := p.m
	if !m.Controlled() {
		return sn.st.Speed, 0, 0, 0
	}
	l := sn.built.PumpLink
	if l < 0 {
		return math.NaN(), 0, 0, 0
	}
	q := sn.sol.Flow[l]
	k := sn.params.PumpHead
	c, ok := m.Source(sn.params, sn.st).Pump.(hydraulics.ControlledPump)
	if !ok {
		return math.NaN(), 0, 0, 0
	}
	if c.Saturated(q, m.Fluid) {
		return m.MaxSpeed(), 0, 0, 0
	}
	// The pump's rise from its element: a matrix-free solution keeps no
	// link drops.
	d, _ := c.Drop(q, m.Fluid)
	dp := -d
	at := func(q, dp, k float64) float64 {
		return m.Set(k, sn.st.Running).SpeedFor(q, dp, m.Fluid)
	}
	v = at(q, dp, k)
	// Central differences of a closed-form root: smooth away from the
	// saturation point, where the branch above takes over.
	hq, hp, hk := 1e-6*max(math.Abs(q), 1e-9), 1e-6*max(math.Abs(dp), 1), 1e-6
	dq = (at(q+hq, dp, k) - at(q-hq, dp, k)) / (2 * hq)
	ddp = (at(q, dp+hp, k) - at(q, dp-hp, k)) / (2 * hp)
	dk = (at(q, dp, k*math.Exp(hk)) - at(q, dp, k*math.Exp(-hk))) / (2 * hk)
	return v, dq, ddp, dk
}

// linearise fills the link-drop derivatives of every parameter and the
// linear functionals of every observation of state sn at its solution.
func (p *problem) linearise(sn *stateNet) {
	sol := sn.sol
	if len(sn.dh) != len(p.params) {
		sn.dh = make([][]term, len(p.params))
	}
	if len(sn.lin) != len(sn.obs) {
		sn.lin = make([]lin, len(sn.obs))
	}
	for j, par := range p.params {
		d := sn.dh[j][:0]
		switch par.Kind {
		case ResistanceParam:
			i := par.Branch
			if f := p.m.FixedIn(i, sn.params.Resistance[i], sn.st); f != nil {
				if l := sn.built.Branch[p.m.Branches[i].ID]; l >= 0 {
					// d(drop)/d(ln R) of a Scaled element is its scaled drop.
					dp, _ := f.Drop(sol.Flow[l], p.m.Fluid)
					d = append(d, term{l, dp})
				}
			}
		case KvParam, StuckParam, OffsetParam:
			i := par.Branch
			if l := sn.built.Branch[p.m.Branches[i].ID]; l >= 0 {
				// dp ∝ 1/KvScale² (also at the leakage floor, which scales
				// with KvScale): d(drop)/d(ln KvScale) = -2 dp; a
				// pressure-independent valve gives its own.
				d = append(d, term{l, p.scaleDrop(sn, i, sol.Flow[l]) * sn.kvGain[i]})
			}
		case HeaderParam:
			for _, l := range sn.built.Headers {
				d = append(d, term{l, sol.Drop[l]})
			}
		case SetPointParam:
			d = append(d, p.setPointTerm(sn, par.Branch)...)
		case PumpParam:
			// The pump's head, hence its (negative) drop, is linear in the
			// multiplier on all three curve coefficients, where the curve
			// sets it; a drive holding its set point does not depend on it.
			if l := sn.built.PumpLink; l >= 0 {
				if c := p.m.PumpHeadDrop(sn.params, sn.st, sol.Flow[l]); c != 0 {
					d = append(d, term{l, c})
				}
			}
		}
		sn.dh[j] = d
	}
	p.controllerTerms(sn)
	for k, oi := range sn.obs {
		o := &p.obs[oi]
		ln := lin{q: sn.lin[k].q[:0], p: sn.lin[k].p[:0], x: sn.lin[k].x[:0]}
		if l := sn.built.PumpLink; o.pump >= 0 && l >= 0 && sn.outlet >= 0 {
			dp := sol.Pressure[sn.outlet] - sol.Pressure[sn.ret] + p.m.Lift()
			_, dq, ddp, dk := p.onePumpLin(sn, o, sol.Flow[l], dp, sn.params.PumpHead)
			ln.q = append(ln.q, term{l, dq})
			ln.p = append(ln.p, term{sn.outlet, ddp}, term{sn.ret, -ddp})
			if p.pIdx >= 0 && dk != 0 {
				ln.x = append(ln.x, term{p.pIdx, dk})
			}
			sn.lin[k] = ln
			continue
		}
		switch o.what {
		case site.Flow:
			for _, l := range sn.flowOf[o.branch] {
				ln.q = append(ln.q, term{l, 1})
			}
		case site.TotalFlow:
			for _, l := range sn.topFlow {
				ln.q = append(ln.q, term{l, 1})
			}
		case site.BranchDiff:
			id := p.m.Branches[o.branch].ID
			ln.p = append(ln.p, term{sn.built.SupplyNode[id], 1}, term{sn.built.ReturnNode[id], -1})
		case site.ControlledDiff:
			id := p.m.Branches[o.branch].ID
			if l, ok := sn.built.Controller[id]; ok {
				from, _ := sn.built.Net.LinkEnds(l)
				ln.p = append(ln.p, term{sn.built.SupplyNode[id], 1}, term{from, -1})
			}
		case site.HeaderDiff:
			ln.p = append(ln.p, term{sn.top, 1}, term{sn.ret, -1})
		case site.PumpDiff:
			if sn.outlet >= 0 {
				ln.p = append(ln.p, term{sn.outlet, 1}, term{sn.ret, -1})
			}
		case site.Speed:
			if _, dq, ddp, dk := p.speed(sn); dq != 0 || ddp != 0 || dk != 0 {
				if l := sn.built.PumpLink; l >= 0 {
					ln.q = append(ln.q, term{l, dq})
					ln.p = append(ln.p, term{sn.outlet, ddp}, term{sn.ret, -ddp})
				}
				if p.pIdx >= 0 && dk != 0 {
					ln.x = append(ln.x, term{p.pIdx, dk})
				}
			}
		case site.ValveDiff:
			links := sn.flowOf[o.branch]
			q := p.flow(sn, links)
			_, slope := p.valveDrop(sn, o.branch, q)
			for _, l := range links {
				ln.q = append(ln.q, term{l, slope})
			}
			if j := p.kvIdx[o.branch]; j >= 0 {
				ln.x = append(ln.x, term{j, p.scaleDrop(sn, o.branch, q) * sn.kvGain[o.branch]})
			}
		}
		sn.lin[k] = ln
	}
}

// jacobian fills the rows of state sn's observations, each divided by its
// sigma, by the implicit-function theorem: forward (one Sensitivity per
// parameter) or adjoint (one SensitivityT per observation), whichever needs
// fewer solves, then adds the direct terms.
func (p *problem) jacobian(sn *stateNet, jac *mat.Dense) error {
	var err error
	if len(p.params) <= len(sn.obs) {
		err = p.jacobianForward(sn, jac)
	} else {
		err = p.jacobianAdjoint(sn, jac)
	}
	if err != nil {
		return err
	}
	p.jacobianDirect(sn, jac)
	return nil
}

// jacobianForward sets the network part of the rows: column j is the
// observations' functionals of Sensitivity(dh_j).
func (p *problem) jacobianForward(sn *stateNet, jac *mat.Dense) error {
	sol := sn.sol
	dh := make([]float64, len(sol.Flow))
	for j := range p.params {
		if len(sn.dh[j]) == 0 {
			for _, oi := range sn.obs {
				jac.Set(oi, j, 0)
			}
			continue
		}
		for _, t := range sn.dh[j] {
			dh[t.i] += t.c
		}
		dq, dp, err := sol.Sensitivity(dh)
		if err != nil {
			return fmt.Errorf("state %q: %w", sn.st.Label, err)
		}
		for _, t := range sn.dh[j] {
			dh[t.i] = 0
		}
		for k, oi := range sn.obs {
			ln := &sn.lin[k]
			var v float64
			for _, t := range ln.q {
				v += t.c * dq[t.i]
			}
			for _, t := range ln.p {
				v += t.c * dp[t.i]
			}
			jac.Set(oi, j, v/p.obs[oi].sigma)
		}
	}
	return nil
}

// jacobianAdjoint sets the network part of the rows: row k is
// SensitivityT of observation k's functional, applied to every dh_j.
func (p *problem) jacobianAdjoint(sn *stateNet, jac *mat.Dense) error {
	sol := sn.sol
	wq := make([]float64, len(sol.Flow))
	wp := make([]float64, len(sol.Pressure))
	for k, oi := range sn.obs {
		ln := &sn.lin[k]
		row := jac.RawRowView(oi)
		if len(ln.q) == 0 && len(ln.p) == 0 {
			clear(row)
			continue
		}
		for _, t := range ln.q {
			wq[t.i] += t.c
		}
		for _, t := range ln.p {
			wp[t.i] += t.c
		}
		g, err := sol.SensitivityT(wq, wp)
		if err != nil {
			return fmt.Errorf("state %q: %w", sn.st.Label, err)
		}
		for _, t := range ln.q {
			wq[t.i] = 0
		}
		for _, t := range ln.p {
			wp[t.i] = 0
		}
		s := p.obs[oi].sigma
		for j := range p.params {
			var v float64
			for _, t := range sn.dh[j] {
				v += g[t.i] * t.c
			}
			row[j] = v / s
		}
	}
	return nil
}

// jacobianDirect adds the terms through which an observation depends on a
// parameter other than through the network (a valve differential on its
// valve's Kv).
func (p *problem) jacobianDirect(sn *stateNet, jac *mat.Dense) {
	for k, oi := range sn.obs {
		for _, t := range sn.lin[k].x {
			jac.Set(oi, t.i, jac.At(oi, t.i)+t.c/p.obs[oi].sigma)
		}
	}
}

// opProblem is a problem solved matrix-free: its Jacobian products are one
// Sensitivity (or SensitivityT) per state at the latest evaluation.
type opProblem struct{ *problem }

// MulVec implements Operator.
func (p opProblem) MulVec(dst, v []float64) {
	for i := range dst {
		dst[i] = 0
	}
	for _, sn := range p.states {
		if len(sn.obs) == 0 || sn.sol == nil {
			continue
		}
		dh, _ := sn.scratch()
		for j, vj := range v {
			if vj == 0 {
				continue
			}
			for _, t := range sn.dh[j] {
				dh[t.i] += vj * t.c
			}
		}
		dq, dp, x := sn.outputs()
		if err := sn.sol.SensitivityInto(dh, dq, dp, x); err != nil {
			// The factor was valid when the state was solved: an error here
			// is a non-finite v, which the engine rules out.
			fillNaN(dst)
			return
		}
		for k, oi := range sn.obs {
			dst[oi] = sn.lin[k].apply(dq, dp, v) / p.obs[oi].sigma
		}
	}
}

// MulTransVec implements Operator.
func (p opProblem) MulTransVec(dst, w []float64) {
	for j := range dst {
		dst[j] = 0
	}
	for _, sn := range p.states {
		if len(sn.obs) == 0 || sn.sol == nil {
			continue
		}
		wq, wp := sn.scratch()
		for k, oi := range sn.obs {
			ln := &sn.lin[k]
			c := w[oi] / p.obs[oi].sigma
			for _, t := range ln.q {
				wq[t.i] += c * t.c
			}
			for _, t := range ln.p {
				wp[t.i] += c * t.c
			}
			for _, t := range ln.x {
				dst[t.i] += c * t.c
			}
		}
		g, _, x := sn.outputs()
		if err := sn.sol.SensitivityTInto(wq, wp, g, x); err != nil {
			fillNaN(dst)
			return
		}
		for j := range dst {
			var s float64
			for _, t := range sn.dh[j] {
				s += g[t.i] * t.c
			}
			dst[j] += s
		}
	}
}

// MulVecs implements lsq.MultiOperator: each dst[k] = J v[k] by MulVec's
// operations, the network solves of the batch side by side
// (network.Solution.SensitivityIntoN).
func (p opProblem) MulVecs(dst, v [][]float64) {
	for k := range dst {
		clear(dst[k])
	}
	for _, sn := range p.states {
		if len(sn.obs) == 0 || sn.sol == nil {
			continue
		}
		vs := sn.sets(len(v))
		dh, dq, dp, x := make([][]float64, len(v)), make([][]float64, len(v)), make([][]float64, len(v)), make([][]float64, len(v))
		for k, vk := range v {
			dh[k], dq[k], dp[k], x[k] = vs[k].bufL, vs[k].outL, vs[k].outN, vs[k].outX
			for j, vj := range vk {
				if vj == 0 {
					continue
				}
				for _, t := range sn.dh[j] {
					dh[k][t.i] += vj * t.c
				}
			}
		}
		if err := sn.sol.SensitivityIntoN(dh, dq, dp, x); err != nil {
			// A non-finite v, which the engine rules out: each product
			// alone, as MulVec gives it.
			for k := range dst {
				p.MulVec(dst[k], v[k])
			}
			return
		}
		for k := range v {
			dq, dp, vk, dk := dq[k], dp[k], v[k], dst[k]
			for kk, oi := range sn.obs {
				dk[oi] = sn.lin[kk].apply(dq, dp, vk) / p.obs[oi].sigma
			}
		}
	}
}

// MulTransVecs implements lsq.MultiOperator: each dst[k] = Jᵀ w[k] by
// MulTransVec's operations, the network solves of the batch side by side
// (network.Solution.SensitivityTIntoN).
func (p opProblem) MulTransVecs(dst, w [][]float64) {
	for k := range dst {
		clear(dst[k])
	}
	for _, sn := range p.states {
		if len(sn.obs) == 0 || sn.sol == nil {
			continue
		}
		vs := sn.sets(len(w))
		wq, wp, g, x := make([][]float64, len(w)), make([][]float64, len(w)), make([][]float64, len(w)), make([][]float64, len(w))
		for k, wk := range w {
			wq[k], wp[k], g[k], x[k] = vs[k].bufL, vs[k].bufN, vs[k].outL, vs[k].outX
			dk := dst[k]
			for kk, oi := range sn.obs {
				ln := &sn.lin[kk]
				c := wk[oi] / p.obs[oi].sigma
				for _, t := range ln.q {
					wq[k][t.i] += c * t.c
				}
				for _, t := range ln.p {
					wp[k][t.i] += c * t.c
				}
				for _, t := range ln.x {
					dk[t.i] += c * t.c
				}
			}
		}
		if err := sn.sol.SensitivityTIntoN(wq, wp, g, x); err != nil {
			for k := range dst {
				p.MulTransVec(dst[k], w[k])
			}
			return
		}
		for k := range w {
			gk, dk := g[k], dst[k]
			for j := range dk {
				var s float64
				for _, t := range sn.dh[j] {
					s += gk[t.i] * t.c
				}
				dk[j] += s
			}
		}
	}
}

// Fork implements lsq.Forker: the products of p on copies of its states
// that share everything the products read (solutions, derivatives,
// functionals) and own their scratch vectors. Only MulVec and MulTransVec
// may be called on it, and only until p's next evaluation.
func (p opProblem) Fork() lsq.Operator {
	q := &problem{obs: p.obs, states: make([]*stateNet, len(p.states))}
	for i, sn := range p.states {
		q.states[i] = &stateNet{obs: sn.obs, sol: sn.sol, dh: sn.dh, lin: sn.lin}
	}
	return opProblem{q}
}

func fillNaN(v []float64) {
	for i := range v {
		v[i] = math.NaN()
	}
}

// newStateNet builds the network of state st at multipliers pp and the
// index maps the predictions need.
func newStateNet(m *plant.Model, st plant.State, pp plant.Params) (*stateNet, error) {
	l, err := m.LadderIn(pp, st)
	if err != nil {
		return nil, fmt.Errorf("state %q: %w", st.Label, err)
	}
	built, err := m.Build(l, m.Source(pp, st))
	if err != nil {
		return nil, fmt.Errorf("state %q: %w", st.Label, err)
	}
	net := built.Net
	nb := len(m.Branches)
	sn := &stateNet{st: st, built: built, flowOf: make([][]int, nb),
		supplyHdr: make([]int, nb), returnHdr: make([]int, nb), outlet: -1}
	var links func(i int) []int
	links = func(i int) []int {
		b := &m.Branches[i]
		if l := built.Branch[b.ID]; l >= 0 {
			return []int{l}
		}
		var out []int
		for _, c := range b.Children {
			out = append(out, links(c)...)
		}
		return out
	}
	for i, b := range m.Branches {
		sn.flowOf[i] = links(i)
		sn.supplyHdr[i], sn.returnHdr[i] = -1, -1
		if l, ok := net.LinkIndex(b.ID + ".supply-header"); ok {
			sn.supplyHdr[i] = l
		}
		if l, ok := net.LinkIndex(b.ID + ".return-header"); ok {
			sn.returnHdr[i] = l
		}
	}
	var ok bool
	if sn.ret, ok = net.NodeIndex(network.ReturnID); !ok {
		return nil, fmt.Errorf("state %q: network has no return node: %w", st.Label, ErrSurvey)
	}
	if sn.top, ok = net.NodeIndex(network.MainOutletID); !ok {
		if sn.top, ok = net.NodeIndex(network.PumpOutletID); !ok {
			sn.top, _ = net.NodeIndex(network.SupplyID)
		}
	}
	if built.PumpLink >= 0 {
		sn.outlet, _ = net.NodeIndex(network.PumpOutletID)
		sn.topFlow = []int{built.PumpLink}
	} else {
		for _, i := range m.Top() {
			sn.topFlow = append(sn.topFlow, sn.flowOf[i]...)
		}
	}
	return sn, nil
}
