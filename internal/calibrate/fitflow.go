package calibrate

import (
	"context"
	"fmt"
	"math"
	"slices"

	"flowset/internal/hydraulics"
	"flowset/internal/site"
)

// pumpAgreeZ is how far, in combined standard uncertainties, a pump's read
// differential may lie from its curve at the read speed and the read total
// flow for the three to be taken as agreeing: the two-sided 95 % point,
// rounded (common practice, no source).
const pumpAgreeZ = 2.0

// weakValves answers a total flow the fit set aside, or missed by more than
// pumpAgreeZ, while the pump's own readings agree with it. A balancing
// valve read through its test points alone (its differential, or a valve
// meter's flow for it) cannot be told from the rest of its branch, so the
// fit takes it on its table and lets the branch's fixed resistance take
// whatever the readings say: a valve seized or set more closed than
// recorded then reads as a branch far freer than designed (on a fresh
// independent 44-branch plant five seized valves recorded wide open were
// fitted at 0.06-0.45 times their branches' design resistance), and its
// branch is given the flow its table would pass at the differential read,
// up to 3.6 times the true one. Nothing in the model can take that flow
// back, so the one reading of the branches' sum, the total flow at the
// pump, is set aside as an outlier, and the pump is made stronger than its
// curve and the headers smoother to supply the flow that is not there
// (e10: the pump 1.095 times its curve, the headers 0.89, the flow 10.8
// standard uncertainties above the clamp-on's; the plan then ran the pump
// about 5 % slow and every branch got 93-95 %). Where the test points read
// so far off that the fit sets them aside instead, the branch keeps its
// design resistance behind a valve on its table, which passes the same
// flow too many.
//
// Faults raise a branch's resistance (fouling, a part-closed isolating
// valve); little lowers it beyond a clean branch's scatter. So when the
// pump's differential, speed and a state's total flow agree with the pump's
// curve (pumpAgreeZ) and the fit sets that total flow aside or misses it,
// the branches whose valve is only assumed and whose fitted resistance is
// below 1/SuspectRatio of design, or whose test points were set aside, are
// refitted together with their valves set elsewhere than recorded (the
// offset free) and their resistance under the clean prior, the total flow
// and their own readings back in. The refit is kept when it keeps every
// such total flow, fits it better, and sets aside no reading the fit it
// replaces kept: the total flow is then explained by the weakly read
// branches together, not by the pump alone.
//
// Where no total flow strains the fit (a partial survey: the branches
// nobody read take up whatever the weak ones claim), the same refit is
// made on the prior alone for the weak valves the readings could not test
// (Assumed), and kept when it sets aside no reading the fit it replaces
// kept and raises the readings' χ² by less than strongEvidence: the
// branch's own readings are then explained as well either way, and only
// the refit gives the headers and the pump the flows the plant passes. A
// far-end branch of an independent 80-branch plant surveyed at 30 %, a
// loose plug read at its test points as 1.45 times its flow, had the
// headers fitted 5 % smooth (95 % 0.91-0.99, the full survey's 1.02) and
// the pump set short, eight of its neighbours at 88-92 %. On the 70
// independent plants the plans' summed rms fell 253.3 -> 249.8; of the 48
// valves so taken there, 23 were loose plugs, 24 test points reading high
// and one a clean branch's (DEVELOPERS.md). A total flow
// the fit strains that the pump's readings do not confirm leaves every
// valve on its table: the readings then disagree among themselves. It
// returns the fit to go on from.
func (su *setup) weakValves(ctx context.Context, base *fitRun, verdicts []ValveVerdict) (*fitRun, error) {
	m := su.m
	if m.Pump == nil || m.Several() || su.rSigma == nil {
		return base, nil
	}
	// The total flows the pump's own readings confirm, which the fit set
	// aside or missed by more than pumpAgreeZ.
	var flows []int // setup observations
	outlier := map[int]bool{}
	for _, oi := range base.res.Outliers {
		outlier[base.sel[oi]] = true
	}
	var setAside int
	strained := false
	for oi, k := range base.sel {
		o := &su.obs[k]
		if o.what != site.TotalFlow || o.branch >= 0 || o.pump >= 0 || !(outlier[k] || math.Abs(base.res.Residual[oi]) > pumpAgreeZ) {
			continue
		}
		strained = true
		if !su.pumpAgrees(k) {
			continue
		}
		flows = append(flows, k)
		if outlier[k] {
			setAside++
		}
	}
	switch {
	case strained && len(flows) == 0:
		// A total flow the fit sets aside and the pump's own readings
		// do not confirm: the readings disagree among themselves, and
		// which valve or meter is off they do not say.
		return base, nil
	case !strained && su.opt.TakeFree:
		// Free branches are taken as read.
		return base, nil
	}
	p := base.prob
	// Branches read at their valve's test points, and those whose
	// test-point readings the fit set aside: with the valve on its table
	// the branch then takes the flow the valve's table gives at its branch
	// differential, as wrong as the readings set aside said.
	testPoints, pointsOut := make([]bool, len(m.Branches)), make([]bool, len(m.Branches))
	for _, k := range base.sel {
		if o := &su.obs[k]; o.branch >= 0 && o.what == site.ValveDiff {
			testPoints[o.branch] = true
			pointsOut[o.branch] = pointsOut[o.branch] || outlier[k]
		}
	}
	var weak []int
	for i := range m.Branches {
		b := &m.Branches[i]
		j := p.rIdx[i]
		if b.Valve == nil || b.PI != nil || su.kvSep[i] || !testPoints[i] || base.hyp[i] != FollowsTable || j < 0 {
			continue
		}
		if !strained && su.evidence[i] {
			// Read at two settings, the valve was tested and found on
			// its table: the branch is as free as it reads.
			continue
		}
		if base.res.X[j] < -math.Log(SuspectRatio) || pointsOut[i] {
			weak = append(weak, i)
		}
	}
	if len(weak) == 0 && setAside == 0 {
		return base, nil
	}
	hyp := slices.Clone(base.hyp)
	saved := make([]float64, len(weak))
	for n, i := range weak {
		hyp[i] = SetElsewhere
		saved[n] = su.rSigma[i]
		su.rSigma[i] = su.opt.PriorClean
	}
	restore := func() {
		for n, i := range weak {
			su.rSigma[i] = saved[n]
		}
	}
	// The total flows and the freed valves' readings go back in: a valve
	// set elsewhere explains its own test points.
	var exclude []int
	readmit := map[int]bool{}
	for _, oi := range base.res.Outliers {
		k := base.sel[oi]
		if o := &su.obs[k]; slices.Contains(flows, k) || (o.branch >= 0 && hyp[o.branch] != base.hyp[o.branch]) {
			readmit[k] = true
			continue
		}
		exclude = append(exclude, oi)
	}
	su.opt.progress("the total flow at the pump against valves read at their test points", 0, 0)
	next, err := su.runLocal(ctx, hyp, base.sel, base, su.opt.OutlierZ, false, -1, exclude)
	if err != nil {
		restore()
		if ctx.Err() != nil {
			return nil, err
		}
		return base, nil
	}
	// What the total flows gain: their χ² at the fit that set them aside
	// or missed them against the refit's.
	var gain float64
	for oi, k := range base.sel {
		if slices.Contains(flows, k) {
			gain += base.res.Residual[oi] * base.res.Residual[oi]
		}
	}
	kept := true
	for oi, k := range next.sel {
		if slices.Contains(flows, k) {
			gain -= next.res.Residual[oi] * next.res.Residual[oi]
		}
	}
	for _, oi := range next.res.Outliers {
		if slices.Contains(flows, next.sel[oi]) {
			kept = false
		}
	}
	rise := next.res.ChiSquare - base.res.ChiSquare
	if !kept || strained && !(gain > 0) || !strained && !(rise < strongEvidence) || len(next.res.Outliers) > len(base.res.Outliers)-len(readmit) {
		restore()
		return base, nil
	}
	o := su.opt
	for _, i := range weak {
		// The readings say nothing of the resistance once the valve is
		// free: its spread is the prior mixture's.
		su.faultProb[i] = o.FaultShare
		su.mixSD[i] = math.Sqrt((1-o.FaultShare)*o.PriorClean*o.PriorClean + o.FaultShare*o.PriorResistance*o.PriorResistance)
		su.slabSD[i], su.slabMean[i] = o.PriorResistance, 0
		su.dataLn[i], su.dataSD[i] = math.NaN(), math.NaN()
		v := &verdicts[i]
		v.Hypothesis = SetElsewhere
		v.DeltaChiSquare, v.DeltaScore = gain, gain
		if !strained {
			v.Assumed, v.TableRatio = true, math.Exp(base.res.X[p.rIdx[i]])
			v.DeltaChiSquare, v.DeltaScore = -rise, -rise
			v.Note = fmt.Sprintf("read through its test points alone, which cannot tell the valve from its branch; taken at its recorded setting its branch would be %.2g times its design resistance, which no fault makes: valve taken as set elsewhere (or its test points reading high), its branch near design (the readings' chi-square higher by %.1f)", v.TableRatio, rise)
			continue
		}
		v.Note = fmt.Sprintf("read through its test points alone, which cannot tell the valve from its branch; taken at its recorded setting its branch passed far more than the total flow at the pump allows (which the pump's differential and speed confirm on its curve): valve taken as set elsewhere, its branch near design (the total flow's chi-square lower by %.1f)", gain)
	}
	return next, nil
}

// pumpAgrees reports whether the total flow of observation k, the pump
// differential and the speed of its state agree with the pump's curve at
// its rated head (within pumpAgreeZ combined standard uncertainties). The
// speed is the one read, or on a pump boundary the state's; a drive holding
// a set point without a speed read says nothing.
func (su *setup) pumpAgrees(k int) bool {
	m := su.m
	f := &su.obs[k]
	var dp, speed *obs
	for n := range su.obs {
		o := &su.obs[n]
		if o.state != f.state || o.branch >= 0 || o.pump >= 0 {
			continue
		}
		switch o.what {
		case site.PumpDiff:
			dp = o
		case site.Speed:
			speed = o
		}
	}
	if dp == nil {
		return false
	}
	st := m.States[f.state]
	s, ss := st.Speed, 0.0
	switch {
	case speed != nil:
		s, ss = speed.value, speed.sigma
	case m.Site.Boundary.Kind != site.PumpCurve:
		return false
	}
	if !(s > 0) {
		return false
	}
	c := m.Pump.AtSpeed(s)
	rg := m.Fluid.Density * hydraulics.StandardGravity
	q := f.value
	want := rg * c.Head(q)
	dq := rg * c.Slope(q) * f.sigma
	ds := rg * (2*s*m.Pump.A0 + m.Pump.A1*q) * ss
	u := math.Sqrt(dp.sigma*dp.sigma + dq*dq + ds*ds)
	return math.Abs(dp.value-want) <= pumpAgreeZ*u
}
