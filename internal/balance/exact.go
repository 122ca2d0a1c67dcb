package balance

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
	"flowset/internal/network"
	"flowset/internal/plant"
)

// exact is the plan with exact (unrounded) settings: steps 1-3 of the
// package comment.
type exact struct {
	m *plant.Model
	p plant.Params
	f fluid.State

	q     []float64 // target flow per branch, m3/s
	fixed []float64 // drop of the fixed parts at q, Pa
	open  []float64 // drop of the fully open valve at q (0 without a valve)
	sub   []float64 // a riser's ladder's need, Pa
	need  []float64 // differential needed across the take-offs, valve open
	path  []float64 // header loss from its ladder's source connections
	avail []float64 // differential across the take-offs at the plan
	valve []float64 // drop the valve must take at the plan
	index []bool    // on the index path
	// kv is the nominal Kv the valve's characteristic must give and
	// setting its exact setting; NaN without a valve.
	kv, setting []float64
	// surplus is the differential a branch without a valve cannot absorb,
	// clamped the Kv below what the valve reaches when fully throttled.
	surplus []float64
	clamped []bool
	// supFlow and retFlow are the flows of the header segments ahead of
	// each take-off, in the direction the network builder draws them.
	supFlow, retFlow []float64

	// ends caches each valve's Kv at the ends of its range, by branch
	// (valves of one model share a characteristic, but Characteristic
	// values are not comparable, so by branch is simplest).
	ends [][2]float64

	least    float64 // source differential needed, Pa
	indexID  int
	indexIDs []string

	// A controlled riser's plan (NaN elsewhere): spanLeast is the least
	// its controller's span needs (its own parts, partner valve fully
	// open, and its sub-ladder's need), setPoint the set point planned
	// (spanLeast within the controller's range), ctrlOpen the controller's
	// wide-open drop at the riser's flow.
	spanLeast, setPoint, ctrlOpen []float64
}

// newExact computes the exact plan for targets q (risers' entries are
// overwritten with the sums of their sub-branches).
func newExact(m *plant.Model, p plant.Params, q []float64) (*exact, error) {
	e, err := newNeeds(m, p, q)
	if err != nil {
		return nil, err
	}
	if err := e.settle(); err != nil {
		return nil, err
	}
	return e, nil
}

// settle completes an exact plan from newNeeds: every valve's drop, Kv and
// setting at the least differential.
func (e *exact) settle() error {
	return e.assign(e.m.Top(), e.least)
}

// newNeeds is newExact without the valves' drops, Kvs and settings (see
// settle): what every branch needs, the header losses and the index path,
// for the iterations that read only those (the starved branches' flows),
// a valve's setting being a search on its table.
func newNeeds(m *plant.Model, p plant.Params, q []float64) (*exact, error) {
	n := len(m.Branches)
	e := &exact{m: m, p: p, f: m.Fluid, q: q,
		fixed: make([]float64, n), open: make([]float64, n), sub: make([]float64, n), need: make([]float64, n),
		path: make([]float64, n), avail: make([]float64, n), valve: make([]float64, n), index: make([]bool, n),
		kv: make([]float64, n), setting: make([]float64, n), surplus: make([]float64, n), clamped: make([]bool, n),
		supFlow: make([]float64, n), retFlow: make([]float64, n), ends: make([][2]float64, n),
		spanLeast: make([]float64, n), setPoint: make([]float64, n), ctrlOpen: make([]float64, n),
	}
	for i := range n {
		e.spanLeast[i], e.setPoint[i], e.ctrlOpen[i] = math.NaN(), math.NaN(), math.NaN()
	}
	byModel := map[any][2]float64{}
	for i := range m.Branches {
		b := &m.Branches[i]
		if b.Valve == nil {
			continue
		}
		var key any = b.ValveModel
		if b.ValveModel == nil {
			key = i
		}
		kv, ok := byModel[key]
		if !ok {
			lo, hi := b.Valve.Range()
			var err error
			if kv[0], err = b.Valve.KvAt(lo); err == nil {
				kv[1], err = b.Valve.KvAt(hi)
			}
			if err != nil {
				return nil, fmt.Errorf("branch %q: valve: %w: %w", b.ID, err, ErrInput)
			}
			byModel[key] = kv
		}
		e.ends[i] = kv
	}
	top := m.Top()
	e.flows(top)
	need, err := e.ladderNeed(top)
	if err != nil {
		return nil, err
	}
	e.least = need
	// Index path: the largest need-plus-path in each ladder, going down
	// while the index is a riser whose valve (or lack of one) passes the
	// ladder exactly its need.
	ids := top
	for {
		k := argmaxNeed(e, ids)
		e.index[k] = true
		e.indexIDs = append(e.indexIDs, m.Branches[k].ID)
		if !m.Branches[k].Riser() {
			e.indexID = k
			break
		}
		ids = m.Branches[k].Children
	}
	return e, nil
}

func argmaxNeed(e *exact, ids []int) int {
	best := ids[0]
	for _, i := range ids[1:] {
		if e.need[i]+e.path[i] > e.need[best]+e.path[best] {
			best = i
		}
	}
	return best
}

// flows sums the targets of a ladder's branches up through the risers.
func (e *exact) flows(ids []int) float64 {
	var s float64
	for _, i := range ids {
		b := &e.m.Branches[i]
		if b.Riser() {
			e.q[i] = e.flows(b.Children)
		}
		s += e.q[i]
	}
	return s
}

func (e *exact) drop(el hydraulics.Element, q float64) float64 {
	if el == nil {
		return 0
	}
	d, _ := el.Drop(q, e.f)
	return d
}

func (e *exact) segment(els []hydraulics.Element, q float64) float64 {
	var s float64
	for _, el := range els {
		s += e.drop(el, q)
	}
	return s * e.p.Header
}

// ladderNeed fills need and path for a ladder's branches and returns the
// differential the ladder needs across its source connections.
func (e *exact) ladderNeed(ids []int) (float64, error) {
	m := e.m
	for _, i := range ids {
		b := &m.Branches[i]
		e.fixed[i] = e.drop(m.FixedElement(i, e.p.Resistance[i]), e.q[i])
		if b.Valve != nil {
			// The valve element's law above its leakage floor.
			e.open[i], _ = hydraulics.KvDrop(e.q[i], e.ends[i][1]*e.p.KvScale[i], e.f.Density)
		}
		if b.PI != nil {
			if err := e.setHeld(i); err != nil {
				return 0, err
			}
		}
		e.need[i] = e.fixed[i] + e.open[i]
		if b.Riser() {
			s, err := e.ladderNeed(b.Children)
			if err != nil {
				return 0, err
			}
			e.sub[i] = s
			e.need[i] += s
			if b.Controlled() {
				// The controller holds its span at the set point and
				// throttles the rest: the set point is the least that
				// serves the span's index (within the controller's range,
				// the partner valve taking what a higher lowest set point
				// adds, or the branches' valves where the span is the
				// branches alone), and the riser needs it plus the
				// controller's wide-open drop (and its own parts where
				// they lie outside the span).
				outside := 0.0
				if b.Controller.Below() {
					outside = e.fixed[i] + e.open[i]
				}
				e.spanLeast[i] = e.need[i] - outside
				lo, _ := b.Controller.Range()
				e.setPoint[i] = max(e.spanLeast[i], lo)
				e.ctrlOpen[i], _ = hydraulics.KvDrop(e.q[i], b.Controller.Kvs, e.f.Density)
				e.need[i] = outside + e.setPoint[i] + e.ctrlOpen[i]
			}
		}
		if !finite(e.need[i]) {
			return 0, fmt.Errorf("branch %q: differential needed at target is %g: %w", b.ID, e.need[i], ErrInput)
		}
	}
	nb := len(ids)
	// suf[k] is the flow of the branches from position k on: what supply
	// segment k carries (and return segment k in direct return).
	suf := make([]float64, nb+1)
	for k := nb - 1; k >= 0; k-- {
		suf[k] = suf[k+1] + e.q[ids[k]]
	}
	switch m.Arrangement {
	case network.DirectReturn:
		var ls, lr float64
		for k, i := range ids {
			ls += e.segment(m.Branches[i].Supply, suf[k])
			lr += e.segment(m.Branches[i].Return, suf[k])
			e.path[i] = ls + lr
			e.supFlow[i], e.retFlow[i] = suf[k], suf[k]
		}
	case network.ReverseReturn:
		total := suf[0]
		// Return loss from take-off k to the source: the return segments
		// after it, each carrying the branches before it, then the return
		// leg (held by the first branch) carrying the total.
		lr := make([]float64, nb)
		acc := e.segment(m.Branches[ids[0]].Return, total)
		prefix := total
		e.retFlow[ids[0]] = total
		for k := nb - 1; k >= 0; k-- {
			lr[k] = acc
			if k > 0 {
				prefix -= e.q[ids[k]]
				acc += e.segment(m.Branches[ids[k]].Return, prefix)
				e.retFlow[ids[k]] = prefix
			}
		}
		var ls float64
		for k, i := range ids {
			ls += e.segment(m.Branches[i].Supply, suf[k])
			e.path[i] = ls + lr[k]
			e.supFlow[i] = suf[k]
		}
	default:
		for _, i := range ids {
			e.path[i] = 0
		}
	}
	var best float64
	for _, i := range ids {
		best = max(best, e.need[i]+e.path[i])
	}
	return best, nil
}

// assign gives a ladder the differential d across its source connections
// and works out every valve's drop, Kv and setting below it.
func (e *exact) assign(ids []int, d float64) error {
	m := e.m
	for _, i := range ids {
		b := &m.Branches[i]
		e.avail[i] = d - e.path[i]
		rest := e.avail[i] - e.fixed[i] // for the valve and any sub-ladder
		if b.Controlled() {
			// The controller takes everything above its set point.
			rest = e.setPoint[i] - e.fixed[i]
			if b.Controller.Below() {
				rest = e.setPoint[i] + e.open[i]
			}
		}
		if b.Riser() {
			sub := e.sub[i]
			if b.Valve == nil || b.Controlled() && b.Controller.Below() {
				// The sub-ladder takes the rest: a riser without a valve,
				// or a span of the branches alone (its partner valve
				// fully open outside it).
				sub = rest
				if b.Valve != nil {
					sub = rest - e.open[i]
				}
			}
			if err := e.assign(b.Children, sub); err != nil {
				return err
			}
			rest -= sub
		}
		if b.PI != nil {
			// Set for its flow in ladderNeed; it takes the rest.
			e.valve[i] = rest
			continue
		}
		e.kv[i], e.setting[i] = math.NaN(), math.NaN()
		if b.Valve == nil {
			e.surplus[i] = max(rest, 0)
			continue
		}
		e.valve[i] = rest
		if err := e.set(i); err != nil {
			return err
		}
	}
	return nil
}

// HoldMargin is what the plan gives the worst-placed pressure-independent
// valve above its hold differential, as a fraction of it: 10 % (common
// practice, no source), for the valve's own tolerance and the readings'.
const HoldMargin = 0.10

// setHeld sets branch i's pressure-independent valve for its flow (its
// table's setting for q over the valve's flow scale, within its range; a
// flow beyond the table is clamped and marked) and gives it the
// differential it needs: its hold differential at that setting (the
// maker's, or where its Kv asks more, that) plus HoldMargin.
func (e *exact) setHeld(i int) error {
	b := &e.m.Branches[i]
	k := e.p.KvScale[i]
	if !(k > 0) {
		k = 1
	}
	lo, hi := b.PI.Range()
	qlo, err := b.PI.Flow.KvAt(lo)
	if err != nil {
		return fmt.Errorf("branch %q: valve: %w: %w", b.ID, err, ErrInput)
	}
	qhi, err := b.PI.Flow.KvAt(hi)
	if err != nil {
		return fmt.Errorf("branch %q: valve: %w: %w", b.ID, err, ErrInput)
	}
	want := e.q[i] / k
	e.kv[i], e.clamped[i] = math.NaN(), false
	switch {
	case want >= qhi:
		e.setting[i] = hi
		e.clamped[i] = want > qhi*(1+1e-9)
	case want <= qlo:
		e.setting[i] = lo
		e.clamped[i] = want < qlo*(1-1e-9)
	default:
		if e.setting[i], err = b.PI.SettingFor(want); err != nil {
			return fmt.Errorf("branch %q: %w", b.ID, err)
		}
	}
	v, err := b.PI.At(e.setting[i], k)
	if err != nil {
		return fmt.Errorf("branch %q: valve: %w: %w", b.ID, err, ErrInput)
	}
	e.open[i] = max(b.PI.HoldDiff, v.HoldDiff(e.f.Density)) * (1 + HoldMargin)
	return nil
}

// set turns valve i's drop into its nominal Kv and setting.
func (e *exact) set(i int) error {
	b := &e.m.Branches[i]
	lo, hi := b.Valve.Range()
	kvLo, kvHi := e.ends[i][0], e.ends[i][1]
	// The open drop was computed at hi, so a drop at or below it (the index,
	// up to rounding error) is the fully open valve.
	if e.valve[i] <= e.open[i]*(1+1e-12) {
		e.kv[i], e.setting[i] = kvHi, hi
		return nil
	}
	kv, err := hydraulics.KvFromDrop(e.q[i], e.valve[i], e.f.Density)
	if err != nil {
		return fmt.Errorf("branch %q: %w: %w", b.ID, err, ErrInput)
	}
	kv /= e.p.KvScale[i]
	e.kv[i] = kv
	switch {
	case kv >= kvHi:
		e.setting[i] = hi
	case kv <= kvLo:
		e.setting[i] = lo
		e.clamped[i] = kv < kvLo*(1-1e-9)
	default:
		s, err := b.Valve.SettingFor(kv)
		if err != nil {
			return fmt.Errorf("branch %q: %w", b.ID, err)
		}
		e.setting[i] = min(max(s, lo), hi)
	}
	return nil
}

// settings returns the exact settings by branch (NaN without a valve).
func (e *exact) settings() []float64 {
	return append([]float64(nil), e.setting...)
}

// total returns the total target flow.
func (e *exact) total() float64 {
	var s float64
	for _, i := range e.m.Top() {
		s += e.q[i]
	}
	return s
}

// above returns, per branch, what the risers above it take out of the
// source differential with their valves fully open: the sum over its strict
// ancestors of fixed parts, open valve and path. A branch's chain, the
// source differential it needs at its flow, is need + path + above.
func (e *exact) above() []float64 {
	m := e.m
	up := make([]float64, len(m.Branches))
	var down func(ids []int, acc float64)
	down = func(ids []int, acc float64) {
		for _, i := range ids {
			up[i] = acc
			if m.Branches[i].Riser() {
				down(m.Branches[i].Children, acc+e.fixed[i]+e.open[i]+e.path[i])
			}
		}
	}
	down(m.Top(), 0)
	return up
}

// openStarved opens fully the valves of the starved branches and of the risers
// above them, and marks them with the index path's branches as ones the
// rounding leaves open (their drop differs from the open drop only by the
// iteration's tolerance).
func (e *exact) openStarved(starved []bool) {
	m := e.m
	for i, s := range starved {
		if !s {
			continue
		}
		for k := i; ; {
			e.index[k] = true
			if m.Branches[k].Valve != nil {
				_, hi := m.Branches[k].Valve.Range()
				e.setting[k], e.kv[k] = hi, e.ends[k][1]
			}
			if m.Branches[k].PI != nil {
				// Set to its highest flow, it passes what its Kv
				// there gives.
				_, e.setting[k] = m.Branches[k].PI.Range()
			}
			p, ok := m.Index(m.Branches[k].Parent)
			if !ok {
				break
			}
			k = p
		}
	}
}
