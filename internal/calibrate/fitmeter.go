package calibrate

import (
	"context"
	"fmt"
	"math"
	"slices"

	"flowset/internal/site"
)

// MeterDecides is the ValveVerdict.MeterWeight at and above which the
// meter's explanation is ahead by strongEvidence in score: the readings
// then tell the two apart, and a plan takes the meter's explanation alone:
// 1/(1 + exp(-strongEvidence/2)).
const MeterDecides = 0.9525741268224334

// meterCleanBand bounds, in sd of the clean prior, how far the branch's
// resistance may sit from design without its flow readings for a biased
// meter to be weighed: a meter off and a branch off are two faults, which
// one valve set elsewhere explains alone (the same bound as suspectKv).
const meterCleanBand = suspectKv

// meterPlausible screens branch i before weighMeters refits it: a meter
// reading β of the flow shows the valve's Kv β times its own and the rest
// of the branch β⁻² times its resistance, so with the valve on its table
// the branch is at about its fitted ratio times the square of the Kv scale
// the valve shows set elsewhere. Where that is beyond twice the clean band
// the refit cannot bring it within the band (on the independent plants the
// estimate was within 0.35 in ln of the refit's, always on the same side
// of the band), and the refit is spared.
func (su *setup) meterPlausible(f *fitRun, i int) bool {
	jr, jk := f.prob.rIdx[i], f.prob.kvIdx[i]
	v := su.m.Branches[i].Valve
	if jr < 0 || jk < 0 || f.prob.params[jk].Kind != OffsetParam || v == nil || !(su.refKv[i] > 0) {
		return true
	}
	lo, hi := v.Range()
	kv, err := v.KvAt(min(max(su.refSet[i]+f.res.X[jk], lo), hi))
	if err != nil || !(kv > 0) {
		return true
	}
	k := kv / su.refKv[i]
	return math.Abs(f.res.X[jr]+2*math.Log(k)) <= 2*meterCleanBand*su.opt.PriorClean
}

// mixScore is score(f) with branch i's resistance prior term replaced by
// the fit's whole prior mixture (-2 ln of its density, shifted to be near 0
// at design): a hypothesis that needs the branch restricted pays the
// mixture's price for a fault (FitOptions.FaultShare), not the clean
// component's nor the faulty one's alone, whichever classify chose.
func (su *setup) mixScore(f *fitRun, i int) float64 {
	s := score(f)
	j := f.prob.rIdx[i]
	o := su.opt
	if j < 0 || !(o.FaultShare > 0) || math.IsInf(o.PriorResistance, 1) {
		return s
	}
	x := f.res.X[j]
	if sg := f.prob.params[j].Sigma; !math.IsInf(sg, 1) {
		s -= (x / sg) * (x / sg)
	}
	c2, w2 := o.PriorClean*o.PriorClean, o.PriorResistance*o.PriorResistance
	d := (1-o.FaultShare)*math.Exp(normLogPDF(x, c2)) + o.FaultShare*math.Exp(normLogPDF(x, w2))
	return s - 2*math.Log(d) + 2*normLogPDF(0, c2)
}

// weighMeters weighs, for each valve found set elsewhere on the evidence of
// an independent flow reading (a clamp-on or other meter, not the valve's
// own test points), the other
// explanation of the same readings: the valve follows its table and the
// flow reading is off (a clamp-on meter set up with the wrong pipe size or
// wall reads 10-30 % off). A meter reading a factor β of the true flow makes
// the valve's Kv appear β times its own and the rest of the branch β⁻²
// times its resistance, through the valve differential and the branch
// differential (or the header) alike, so no reading at the branch but a
// second independent flow tells the two apart; what does is how far each
// has to move the branch from design. So also at several settings, where
// the valve is set a constant offset from each: on an equal-percentage
// characteristic that is a constant multiple of each recorded Kv, which a
// meter a constant factor off shows too (on an independent 10-branch plant
// a clamp-on 26 % high at two settings was taken for the valve alone, and
// the branch planned at 90 %); where the characteristic is not, the score
// tells them apart. The two are compared by score, the
// flow readings left out and counted as one free parameter (the meter's
// bias) against the freed offset, and the branch's resistance priced by
// the whole prior mixture. Where the valve set elsewhere is not ahead by
// strongEvidence, the verdict carries the meter explanation's posterior
// probability and the branch's resistance under it (MeterWeight,
// MeterRatio): the plan sets the valve between the two, or for the meter's
// explanation alone where that is ahead by strongEvidence.
//
// The fit itself keeps the valve set elsewhere: a refit under the meter's
// explanation moves every barely read branch a little with the header,
// and on an independent 200-branch plant that alone moved the index
// circuit from one wrongly fitted branch to another (the plan 3.2 -> 4.3 %
// rms), with nothing learnt about either.
//
// Only a branch whose other readings put it within meterCleanBand clean
// sd of design is weighed: otherwise the branch is off whatever the meter.
func (su *setup) weighMeters(ctx context.Context, fin *fitRun, verdicts []ValveVerdict) error {
	out := map[int]bool{}
	for _, oi := range fin.res.Outliers {
		out[fin.sel[oi]] = true
	}
	for i := range su.m.Branches {
		v := &verdicts[i]
		if v.Hypothesis != SetElsewhere || fin.prob.rIdx[i] < 0 {
			continue
		}
		// The branch's independent flows, also those the outlier test set
		// aside: they are the evidence for the valve set elsewhere.
		var flows []int
		for _, k := range fin.sel {
			if o := &su.obs[k]; o.branch == i && o.what == site.Flow && !o.meter {
				flows = append(flows, k)
			}
		}
		if len(flows) == 0 || !su.meterPlausible(fin, i) {
			continue
		}
		var sel, withA []int
		for _, k := range fin.sel {
			switch {
			case slices.Contains(flows, k):
				withA = append(withA, k)
			case !out[k]:
				sel = append(sel, k)
				withA = append(withA, k)
			}
		}
		hypB := slices.Clone(fin.hyp)
		hypB[i] = FollowsTable
		// Full refits, not local ones: a local refit holds the rest of the
		// plant where the fit with the flow put it, which favours the valve
		// set elsewhere (on an independent 300-branch plant a meter 20 %
		// low fell 17 behind locally and came 24 ahead in a full refit).
		// The fit itself is the first when it kept every one of the flows.
		a := fin
		var err error
		if slices.ContainsFunc(flows, func(k int) bool { return out[k] }) {
			a, err = su.runLocal(ctx, fin.hyp, withA, fin, -1, true, -1, nil)
		}
		var b *fitRun
		if err == nil {
			b, err = su.runLocal(ctx, hypB, sel, fin, -1, true, -1, nil)
		}
		if err != nil {
			if ctx.Err() != nil {
				return err
			}
			continue
		}
		lnB := b.res.X[b.prob.rIdx[i]]
		if math.Abs(lnB) > meterCleanBand*su.opt.PriorClean {
			continue
		}
		// One meter set up once on the branch's pipe reads every state
		// off by one factor: one parameter, however many states.
		gain := su.mixScore(a, i) - su.mixScore(b, i) - math.Log(float64(len(a.sel)))
		if gain <= -strongEvidence {
			continue
		}
		v.MeterWeight = 1 / (1 + math.Exp(-gain/2))
		v.MeterRatio = math.Exp(lnB)
		if gain >= strongEvidence {
			v.Note += fmt.Sprintf("; but the valve on its table with its flow reading off fits the readings better (score gain %.1f, %.0f %% against %.0f %%), and the plan takes that", gain, 100*v.MeterWeight, 100*(1-v.MeterWeight))
			continue
		}
		v.Note += fmt.Sprintf("; or else the valve follows its table and its flow reading is off, which the readings cannot tell apart (%.0f %% against %.0f %%, score difference %.1f)", 100*v.MeterWeight, 100*(1-v.MeterWeight), math.Abs(gain))
	}
	return nil
}
