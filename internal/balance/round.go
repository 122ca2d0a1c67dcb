package balance

import (
	"math"

	"flowset/internal/plant"
)

// rounder holds each valve's two candidate marks and the current choice.
type rounder struct {
	pl       *planner
	down, up []float64 // marks either side of the exact setting (NaN without a valve)
	rDown    []float64 // flow ratio at the mark below, at the branch's planned differential
	rUp      []float64
	useUp    []bool
}

// mark rounds setting s of a valve with range [lo, hi] and resolution step
// to a handwheel mark, counting steps from lo as hydraulics.Table.Round does
// (within 1e-9 step of a mark counts as on it).
func mark(s, lo, hi, step float64, up bool) float64 {
	if step <= 0 {
		return s
	}
	const eps = 1e-9
	x := (s - lo) / step
	k := math.Floor(x + eps)
	if up {
		k = math.Ceil(x - eps)
	}
	return min(max(lo+k*step, lo), hi)
}

func newRounder(pl *planner) *rounder {
	ex, m := pl.run, pl.m
	n := len(m.Branches)
	r := &rounder{pl: pl, down: make([]float64, n), up: make([]float64, n), rDown: make([]float64, n), rUp: make([]float64, n), useUp: make([]bool, n)}
	centre := 1 + (pl.lo+pl.hi)/2
	for i := range m.Branches {
		b := &m.Branches[i]
		r.down[i], r.up[i] = math.NaN(), math.NaN()
		if b.PI != nil {
			// Its flow follows its setting whatever the differential:
			// the mark whose flow lies nearest the band's middle (with
			// Smart) or the nearest mark. The index is no exception.
			lo, hi := b.PI.Range()
			s, step := ex.setting[i], b.PI.Flow.Resolution()
			r.down[i], r.up[i] = mark(s, lo, hi, step, false), mark(s, lo, hi, step, true)
			r.rDown[i], r.rUp[i] = r.ratio(i, r.down[i]), r.ratio(i, r.up[i])
			if pl.opt.Rounding == Smart {
				r.useUp[i] = math.Abs(math.Log(r.rUp[i]/centre)) < math.Abs(math.Log(r.rDown[i]/centre))
			} else {
				r.useUp[i] = r.up[i]-s < s-r.down[i]
			}
			continue
		}
		if b.Valve == nil {
			continue
		}
		lo, hi := b.Valve.Range()
		s := ex.setting[i]
		if ex.index[i] {
			r.down[i], r.up[i], r.rDown[i], r.rUp[i] = hi, hi, 1, 1
			continue
		}
		step := b.Valve.Resolution()
		r.down[i], r.up[i] = mark(s, lo, hi, step, false), mark(s, lo, hi, step, true)
		r.rDown[i], r.rUp[i] = r.ratio(i, r.down[i]), r.ratio(i, r.up[i])
		switch pl.opt.Rounding {
		case Smart:
			r.useUp[i] = math.Abs(math.Log(r.rUp[i]/centre)) < math.Abs(math.Log(r.rDown[i]/centre))
		default:
			r.useUp[i] = r.up[i]-s < s-r.down[i]
		}
	}
	return r
}

// ratio estimates branch i's flow over its target at setting s, its branch
// differential held at the plan's: with the square law in valve and the
// rest, q'/q = √(Δp_b / (Δp_b - Δp_v + Δp_v (Kv/Kv')²)).
func (r *rounder) ratio(i int, s float64) float64 {
	ex := r.pl.run
	if pi := r.pl.m.Branches[i].PI; pi != nil {
		// A pressure-independent valve's flow is its table's.
		q, err1 := pi.Flow.KvAt(s)
		q0, err2 := pi.Flow.KvAt(ex.setting[i])
		if err1 != nil || err2 != nil || !(q0 > 0) {
			return 1
		}
		return q / q0
	}
	kv, err := r.pl.m.Branches[i].Valve.KvAt(s)
	if err != nil || !(kv > 0) || !(ex.kv[i] > 0) {
		return 1
	}
	dpb, dpv := ex.avail[i], ex.valve[i]
	k := ex.kv[i] / kv
	den := dpb - dpv + dpv*k*k
	if !(dpb > 0) || !(den > 0) {
		return 1
	}
	return math.Sqrt(dpb / den)
}

func (r *rounder) settings() []float64 {
	out := make([]float64, len(r.down))
	for i := range out {
		out[i] = r.down[i]
		if r.useUp[i] {
			out[i] = r.up[i]
		}
	}
	return out
}

// flip moves the valves of branches outside the band to their other mark
// where the estimate says that brings them nearer the band's middle. It
// reports whether any valve moved.
func (r *rounder) flip(sol *plant.Solved) bool {
	pl := r.pl
	centre := 1 + (pl.lo+pl.hi)/2
	var moved bool
	for i := range pl.m.Branches {
		if math.IsNaN(r.down[i]) || r.down[i] == r.up[i] {
			continue
		}
		now := sol.Flow(i) / pl.run.q[i]
		if now >= 1+pl.lo && now <= 1+pl.hi {
			continue
		}
		cur, other := r.rDown[i], r.rUp[i]
		if r.useUp[i] {
			cur, other = other, cur
		}
		alt := now * other / cur
		if math.Abs(math.Log(alt/centre)) < math.Abs(math.Log(now/centre)) {
			r.useUp[i] = !r.useUp[i]
			moved = true
		}
	}
	return moved
}
