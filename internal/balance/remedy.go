package balance

import (
	"fmt"
	"math"
	"sort"
)

// remedyRatio is the resistance multiplier above which a branch is offered
// a Restore remedy: 1.5 times design, the threshold at which the diagnosis
// calls a branch restricted (common practice, no source).
const remedyRatio = 1.5

// maxRemedies bounds the candidates tried (each costs one pass over the
// tree), the worst first.
const maxRemedies = 20

// chains fills pl.chain: the source differential each branch's chain needs
// at every target (exact.above).
func (pl *planner) chains() {
	ex := pl.ex
	up := ex.above()
	pl.chain = make([]float64, len(ex.q))
	for i := range ex.q {
		pl.chain[i] = ex.need[i] + ex.path[i] + up[i]
	}
}

// starvedUnder reports whether branch i, or a branch below it, is starved.
func (pl *planner) starvedUnder(i int) bool {
	if pl.starved == nil {
		return false
	}
	if pl.starved[i] {
		return true
	}
	for _, c := range pl.m.Branches[i].Children {
		if pl.starvedUnder(c) {
			return true
		}
	}
	return false
}

// remedies lists the faults valves cannot set right: each branch whose
// resistance multiplier exceeds remedyRatio (restore it to design), the
// valves of starved or index branches that a larger valve would help, and,
// when the pump is short, the pump. Each is judged exactly with the remedy
// carried out (leastWith): the least source differential for every target
// before and after, and the branch's own chain. A remedy is kept when it
// lowers the least differential by more than 1 %, or when its branch is
// starved and the remedy lowers what it needs.
func (pl *planner) remedies() {
	m, ex := pl.m, pl.ex
	pl.chains()
	pl.plan.LeastRemedied = math.NaN()
	q := ex.total()
	give := pl.maxDiff(q)
	judge := func(r Remedy, i int, cut map[int]float64) (Remedy, bool) {
		least, inside := pl.leastWith(i, cut)
		r.Least, r.LeastAfter = ex.least, least
		r.Saves = ex.least - least
		r.Need, r.NeedAfter = pl.chain[i], inside
		r.Starved = pl.starvedUnder(i)
		r.Serves = least <= give*(1+1e-9)
		r.Power, r.AnnualEnergy = math.NaN(), math.NaN()
		if pl.eta > 0 {
			r.Power = q * r.Saves / pl.eta
			if h := m.Site.Hours; h > 0 && finite(h) {
				r.AnnualEnergy = r.Power * h / 1e3
			}
		}
		keep := r.Saves > 0.01*ex.least || r.Starved && r.NeedAfter < r.Need*0.99
		return r, keep
	}
	var cand []int
	for i := range m.Branches {
		if pl.p.Resistance[i] > remedyRatio {
			cand = append(cand, i)
		}
	}
	sort.SliceStable(cand, func(a, b int) bool { return pl.chain[cand[a]] > pl.chain[cand[b]] })
	if len(cand) > maxRemedies {
		cand = cand[:maxRemedies]
	}
	// The targets fix every header flow, so a remedy changes only the
	// drop it cures: the fixed parts' drop scales with the multiplier
	// (restored: fixed/R), the open valve's with 1/KvScale² (twice the Kv:
	// a quarter), and every chain through the branch falls by as much.
	restored := map[int]float64{}
	has := map[int]bool{}
	for _, i := range cand {
		cut := map[int]float64{i: ex.fixed[i] * (1 - 1/pl.p.Resistance[i])}
		r := Remedy{ID: m.Branches[i].ID, Kind: Restore, Ratio: pl.p.Resistance[i],
			Action: fmt.Sprintf("branch %s has %.1f times its design resistance (fouled, or a strainer, isolating valve or coil partly blocked): find and clear the restriction", m.Branches[i].ID, pl.p.Resistance[i])}
		if r, ok := judge(r, i, cut); ok {
			pl.plan.Remedies = append(pl.plan.Remedies, r)
			restored[i] = cut[i]
			has[i] = true
		}
	}
	// A larger valve where the open valve takes much of what a starved or
	// index branch needs.
	var valves []int
	for i := range m.Branches {
		if m.Branches[i].Valve == nil || has[i] || m.Branches[i].Riser() {
			continue
		}
		if ex.index[i] && (pl.short || ex.open[i] > 0.3*ex.need[i]) || pl.starved != nil && pl.starved[i] {
			valves = append(valves, i)
		}
	}
	sort.SliceStable(valves, func(a, b int) bool { return pl.chain[valves[a]] > pl.chain[valves[b]] })
	if len(valves) > maxRemedies {
		valves = valves[:maxRemedies]
	}
	for _, i := range valves {
		cut := map[int]float64{i: 0.75 * ex.open[i]}
		r := Remedy{ID: m.Branches[i].ID, Kind: LargerValve, Ratio: math.NaN(),
			Action: fmt.Sprintf("the fully open valve of branch %s takes %.1f kPa at target: fit a valve of twice its Kv", m.Branches[i].ID, ex.open[i]/1e3)}
		// A larger valve on a starved branch is worth naming only when
		// the pump could then serve it.
		if r, ok := judge(r, i, cut); ok && (r.Saves > 0.01*ex.least || r.NeedAfter+pl.lift <= pl.plan.Required) {
			pl.plan.Remedies = append(pl.plan.Remedies, r)
		}
	}
	// Valves that cannot take off what a branch has to spare: nothing to
	// save at the pump, but the branch comes into its band.
	for i := range m.Branches {
		b := &m.Branches[i]
		var r Remedy
		switch {
		case pl.run.clamped[i] && b.PI != nil:
			lo, hi := b.PI.Range()
			qlo, _ := b.PI.Flow.KvAt(lo)
			qhi, _ := b.PI.Flow.KvAt(hi)
			kind := SmallerValve
			if pl.run.q[i] > qhi {
				kind = LargerValve
			}
			r = Remedy{Kind: kind, Action: fmt.Sprintf("the pressure-independent valve of branch %s cannot be set to hold its target %.3g l/s (its settings hold %.3g to %.3g l/s): fit one of another size", b.ID, pl.run.q[i]*1e3, qlo*1e3, qhi*1e3)}
		case pl.run.clamped[i]:
			r = Remedy{Kind: SmallerValve, Action: fmt.Sprintf("the valve of branch %s passes more than its target even fully throttled (it needs Kv %.3g, its lowest setting gives %.3g): fit a smaller valve", b.ID, pl.run.kv[i], pl.run.ends[i][0])}
		case b.Valve == nil && !b.Riser() && pl.run.surplus[i] > 0.01*pl.run.avail[i]:
			r = Remedy{Kind: FitValve, Action: fmt.Sprintf("branch %s has no balancing valve and %.1f kPa more than it needs: fit one", b.ID, pl.run.surplus[i]/1e3)}
		default:
			continue
		}
		r.ID, r.Ratio, r.Need, r.NeedAfter, r.Least, r.LeastAfter = b.ID, math.NaN(), pl.chain[i], pl.chain[i], ex.least, ex.least
		r.Power, r.AnnualEnergy, r.Serves = math.NaN(), math.NaN(), ex.least <= give*(1+1e-9)
		pl.plan.Remedies = append(pl.plan.Remedies, r)
	}
	if pl.short {
		r := Remedy{Kind: LargerPump, Ratio: math.NaN(), Need: ex.least, NeedAfter: ex.least, Least: ex.least, LeastAfter: ex.least,
			Power: math.NaN(), AnnualEnergy: math.NaN(), Starved: true, Serves: true,
			Action: fmt.Sprintf("a pump giving %.1f kPa at %.3f l/s (this one at speed ratio %.3f, its drive allows %.3f) serves every target as the plant stands", (ex.least+pl.lift)/1e3, q*1e3, pl.plan.Pump.NeededSpeed, pl.plan.Pump.MaxSpeed)}
		pl.plan.Remedies = append(pl.plan.Remedies, r)
	}
	sort.SliceStable(pl.plan.Remedies, func(a, b int) bool {
		ra, rb := pl.plan.Remedies[a], pl.plan.Remedies[b]
		if (ra.Kind == LargerPump) != (rb.Kind == LargerPump) {
			return rb.Kind == LargerPump
		}
		return ra.Saves > rb.Saves
	})
	if len(restored) >= 2 {
		pl.plan.LeastRemedied, _ = pl.leastWith(-1, restored)
	}
}

// leastWith returns the least source differential for every target with
// the drops of the branches in cut lowered by the amounts given, Pa (the
// largest chain over the terminal branches, each chain lowered by the cuts
// on it), and the largest chain through branch i (its own for a terminal
// branch).
func (pl *planner) leastWith(i int, cut map[int]float64) (least, inside float64) {
	m := pl.m
	var walk func(ids []int, acc float64, in bool)
	walk = func(ids []int, acc float64, in bool) {
		for _, b := range ids {
			a, inB := acc+cut[b], in || b == i
			if m.Branches[b].Riser() {
				walk(m.Branches[b].Children, a, inB)
				continue
			}
			c := pl.chain[b] - a
			least = max(least, c)
			if inB {
				inside = max(inside, c)
			}
		}
	}
	walk(m.Top(), 0, false)
	return least, inside
}

// remedyFor returns the remedy for branch i or the nearest riser above it
// with one, preferring its own; nil when there is none.
func (pl *planner) remedyFor(i int, byID map[string]int, pump int) *Remedy {
	m := pl.m
	for k := i; ; {
		if r, ok := byID[m.Branches[k].ID]; ok {
			return &pl.plan.Remedies[r]
		}
		p, ok := m.Index(m.Branches[k].Parent)
		if !ok {
			break
		}
		k = p
	}
	if pl.short && pump >= 0 {
		return &pl.plan.Remedies[pump]
	}
	return nil
}

// remedyIndex maps each branch ID to its first remedy in the plan and
// gives the first larger-pump remedy (-1 none), for remedyFor: a scan of
// the remedies for every short branch was quadratic on large sites.
func (pl *planner) remedyIndex() (byID map[string]int, pump int) {
	byID = make(map[string]int, len(pl.plan.Remedies))
	pump = -1
	for r := len(pl.plan.Remedies) - 1; r >= 0; r-- {
		byID[pl.plan.Remedies[r].ID] = r
		if pl.plan.Remedies[r].Kind == LargerPump {
			pump = r
		}
	}
	return byID, pump
}
