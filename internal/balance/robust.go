package balance

import (
	"fmt"
	"math"
	"sort"
)

// robustGain is the rise of the least differential, as a fraction, above
// which a poorly known parameter is worth a warning (2 %: about what a
// technician can set a pump to; common practice, no source).
const robustGain = 0.02

// robust finds the parameters whose uncertainty could change the pump duty:
// for each branch, the least source differential if its resistance
// multiplier (or its valve's Kv scale) sat at the top (bottom) of its band,
// the others as fitted. With the targets fixed the header flows do not
// depend on any branch's resistance, so only the chains of branches through
// that branch change: the source differential a branch's chain needs is
// chain(i) = need_i + path_i + Σ over its risers (fixed + open valve + path),
// and raising branch j's fixed drop by Δ raises every chain through it by Δ,
// so the least becomes max(least, chain(j) + Δ). Exact and O(n) in all; the
// header multiplier is tried with a whole re-plan.
func (pl *planner) robust() {
	u := pl.opt.Uncertainty
	ex, m := pl.ex, pl.m
	k := u.Coverage
	if k == 0 {
		k = 2
	}
	n := len(m.Branches)
	up := ex.above()
	type hit struct {
		what  string
		least float64
	}
	var hits []hit
	high := ex.least
	for j := range n {
		chain := ex.need[j] + ex.path[j] + up[j]
		if j < len(u.LnResistance) && u.LnResistance[j] > 0 {
			d := chain + ex.fixed[j]*(math.Exp(k*u.LnResistance[j])-1)
			high = max(high, d)
			if d > ex.least*(1+robustGain) {
				hits = append(hits, hit{fmt.Sprintf("branch %q's resistance (sd of ln %.2f)", m.Branches[j].ID, u.LnResistance[j]), d})
			}
		}
		if j < len(u.LnKvScale) && u.LnKvScale[j] > 0 && m.Branches[j].Valve != nil {
			// Δp ∝ 1/KvScale²: the bottom of the Kv band raises the open drop.
			d := chain + ex.open[j]*(math.Exp(2*k*u.LnKvScale[j])-1)
			high = max(high, d)
			if d > ex.least*(1+robustGain) {
				hits = append(hits, hit{fmt.Sprintf("branch %q's valve Kv (sd of ln %.2f)", m.Branches[j].ID, u.LnKvScale[j]), d})
			}
		}
	}
	if u.LnHeader > 0 {
		p := pl.p.Clone()
		p.Header *= math.Exp(k * u.LnHeader)
		if e, err := newExact(m, p, append([]float64(nil), ex.q...)); err == nil {
			high = max(high, e.least)
			if e.least > ex.least*(1+robustGain) {
				hits = append(hits, hit{fmt.Sprintf("the header resistance (sd of ln %.2f)", u.LnHeader), e.least})
			}
		}
	}
	pl.plan.LeastHigh = high
	sort.SliceStable(hits, func(a, b int) bool { return hits[a].least > hits[b].least })
	for c, h := range hits {
		if c == 5 {
			pl.plan.Warnings = append(pl.plan.Warnings, fmt.Sprintf("%d more uncertain parameters could raise the differential needed", len(hits)-5))
			break
		}
		w := fmt.Sprintf("the uncertainty of %s matters: at the end of its band the circuit would need %.1f kPa, not %.1f kPa", h.what, (h.least+pl.lift)/1e3, (ex.least+pl.lift)/1e3)
		if pl.capped {
			if s, err := pl.speedFor(ex.total(), h.least); err == nil {
				if s > pl.m.MaxSpeed()*(1+1e-9) {
					w += fmt.Sprintf(" (pump speed ratio %.3f, above its maximum %.3f: the pump could not give it)", s, pl.m.MaxSpeed())
				} else {
					w += fmt.Sprintf(" (pump speed ratio %.3f)", s)
				}
			}
		}
		pl.plan.Warnings = append(pl.plan.Warnings, w+"; read that branch's flow after setting and raise the pump if it is short")
	}
}
