package cli

import (
	"context"
	"fmt"
	"math"
	"slices"

	"flowset/internal/balance"
	"flowset/internal/calibrate"
	"flowset/internal/diagnose"
	"flowset/internal/parallel"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// tpEdge is the fraction of calibrate.TestPointMax beyond which the
// test-point explanation is not taken even when ahead: an error piled
// against the edge of its prior is the readings asking for something the
// weighed explanations do not hold (a valve off its table: on the independent
// test plants, seized valves scored so). A judgement, no source.
const tpEdge = 0.85

// tpWeighed is a branch's test points weighed, with the valve settings
// they were read at.
type tpWeighed struct {
	calibrate.TestPointVerdict
	Sets []float64
}

// testPointVerdicts weighs, for each branch found off design on its own
// valve's test points alone (no flow read another way), its test points
// reading off against its resistance (calibrate.WeighTestPoints), by model
// index. Where the branch differential was not read in a state, the fitted
// model's is used. Only a branch read at two or more settings can be
// decided (tpOff, tpRight); one read at one gives the weights its reading
// after setting at another would settle.
func testPointVerdicts(ctx context.Context, j *job) (map[int]tpWeighed, error) {
	if j.Cal == nil {
		return nil, nil
	}
	l, m := j.L, j.L.Model
	indep := j.flowReadAnotherWay()
	flagged := map[string]bool{}
	for _, f := range j.Findings {
		switch f.Code {
		case diagnose.Restricted, diagnose.CannotReachDesign, diagnose.Free, diagnose.ValveMisSet, diagnose.ValveStuck:
			flagged[f.Branch] = true
		}
	}
	type group struct {
		k                int // state
		setting          float64
		v, vsd, q, qsd   float64
		d, dsd           float64
		hasV, hasQ, hasD bool
	}
	type cand struct {
		i      int
		groups []*group
		sets   []float64
		c      calibrate.TestPointCase
	}
	var cands []*cand
	for i := range m.Branches {
		b := &m.Branches[i]
		if b.Valve == nil || b.PI != nil || b.Bypass != nil || b.Riser() || b.Controlled() || indep[b.ID] || m.FixedElement(i, 1) == nil {
			continue
		}
		// A valve the fit finds off its mark or seized is weighed too,
		// with that explanation beside the others: at several settings
		// either mimics part of test points reading off, which the fit
		// does not hold (on the independent test plants most biased test
		// points read at two settings were fitted so, and a branch fouled
		// under test points 15 % low, fitted as seized, was left at 72 %).
		if r := j.Fitted.Resistance[i]; !flagged[b.ID] && !(r > calibrate.SuspectRatio || r < 1/calibrate.SuspectRatio) {
			continue
		}
		c := &cand{i: i}
		byKey := map[[2]float64]*group{}
		for k, st := range m.States {
			for _, ri := range st.Readings {
				r := &l.Site.Readings[ri]
				if r.Where != b.ID || r.Bypass {
					continue
				}
				set := r.Setting
				if math.IsNaN(set) {
					set = st.Settings[i]
				}
				key := [2]float64{float64(k), set}
				g := byKey[key]
				if g == nil {
					g = &group{k: k, setting: set}
					byKey[key] = g
					c.groups = append(c.groups, g)
				}
				switch {
				case r.What == site.ValveDiff:
					g.v, g.vsd, g.hasV = r.Value, r.Sigma, true
				case r.What == site.Flow && r.Instrument == "valve-meter":
					g.q, g.qsd, g.hasQ = r.Value, r.Sigma, true
				case r.What == site.BranchDiff:
					g.d, g.dsd, g.hasD = r.Value, r.Sigma, true
				}
			}
		}
		for _, g := range c.groups {
			if (g.hasV || g.hasQ) && !slices.Contains(c.sets, g.setting) {
				c.sets = append(c.sets, g.setting)
			}
		}
		// Read at one setting only, a branch is weighed for the ranking
		// alone, which a larger site does not run.
		if len(c.sets) >= 2 || len(c.sets) == 1 && len(m.Branches) <= maxRankBranches {
			cands = append(cands, c)
		}
	}
	if len(cands) == 0 {
		return nil, nil
	}
	// The fitted model's branch differentials where none was read: one
	// solve per state wanted.
	solved := map[int]*plant.Solved{}
	for _, c := range cands {
		for _, g := range c.groups {
			if g.hasD || solved[g.k] != nil {
				continue
			}
			s, err := m.Solve(ctx, stateParams(j, j.Fitted, g.k), m.States[g.k])
			if err != nil {
				if ctx.Err() != nil {
					return nil, ctx.Err()
				}
				continue
			}
			solved[g.k] = s
		}
	}
	for _, c := range cands {
		i := c.i
		fixed := m.FixedElement(i, 1)
		c.c.Fixed = func(q float64) (float64, float64) { return fixed.Drop(q, m.Fluid) }
		c.c.Lo, c.c.Hi = m.Branches[i].Valve.Range()
		c.c.ValveR = func(set float64) float64 {
			v := m.ValveElement(i, set, 1)
			if v == nil {
				return math.NaN()
			}
			r, _ := v.Drop(1, m.Fluid) // the square law's coefficient
			return r
		}
		for _, g := range c.groups {
			valve := m.ValveElement(i, g.setting, 1)
			if valve == nil || !(g.hasV || g.hasQ) {
				continue
			}
			s := calibrate.TestPointState{Setting: g.setting, Valve: g.v, ValveSD: g.vsd, Branch: g.d, BranchSD: g.dsd}
			if !g.hasV {
				// The meter's flow is its differential through the table.
				dp, slope := valve.Drop(g.q, m.Fluid)
				s.Valve, s.ValveSD = dp, slope*g.qsd
			}
			if !g.hasD {
				sv := solved[g.k]
				if sv == nil || sv.State.Settings[i] != g.setting {
					continue
				}
				s.Branch, s.BranchSD, s.Modelled = sv.BranchDiff(i), 0.01*sv.BranchDiff(i), true
			}
			c.c.States = append(c.c.States, s)
		}
	}
	verdicts := make([]calibrate.TestPointVerdict, len(cands))
	errs := make([]error, len(cands))
	parallel.For(parallel.Workers(j.opts.workers), len(cands), func(_, k int) {
		verdicts[k], errs[k] = calibrate.WeighTestPoints(cands[k].c)
	})
	out := map[int]tpWeighed{}
	for k, c := range cands {
		if errs[k] == nil && verdicts[k].Settings > 0 {
			out[c.i] = tpWeighed{verdicts[k], c.sets}
		}
	}
	return out, nil
}

// tpOff reports whether verdict v, on readings at two or more settings,
// decides for the test points reading off.
func tpOff(v tpWeighed) bool {
	return v.Settings >= 2 && v.Weight >= calibrate.MeterDecides && math.Abs(v.Off) <= tpEdge*calibrate.TestPointMax
}

// tpRight reports whether verdict v, on readings at two or more settings,
// decides for the test points reading right: the branch is off design as
// fitted.
func tpRight(v tpWeighed) bool {
	return v.Settings >= 2 && v.Weight <= 1-calibrate.MeterDecides
}

// applyTestPoints acts on the verdicts of testPointVerdicts: a branch whose
// test points the readings at several settings find reading off is planned
// on its resistance under that explanation, and its findings of a branch
// off design become one of the test points reading off; one they find
// reading right keeps its findings, with the evidence said, and a branch
// short of flow so confirmed is neither held at design nor hedged
// (holdUnconfirmed and hedgeTestPoints skip it).
func applyTestPoints(j *job) {
	if len(j.testPoints) == 0 {
		return
	}
	m := j.L.Model
	var add []diagnose.Finding
	j.Findings = slices.DeleteFunc(j.Findings, func(f diagnose.Finding) bool {
		i, ok := m.Index(f.Branch)
		if !ok {
			return false
		}
		v, ok := j.testPoints[i]
		if !ok {
			return false
		}
		switch f.Code {
		case diagnose.Restricted, diagnose.CannotReachDesign, diagnose.Free, diagnose.ValveMisSet, diagnose.ValveStuck:
		default:
			return false
		}
		return tpOff(v)
	})
	for k := range j.Findings {
		f := &j.Findings[k]
		v, ok := findingTP(j, f)
		if !ok || !tpRight(v) {
			continue
		}
		switch f.Code {
		case diagnose.Restricted, diagnose.CannotReachDesign:
			f.Action = tpRightAction(f.Action)
			fallthrough
		case diagnose.Free, diagnose.ValveMisSet:
			f.Evidence += fmt.Sprintf("; its valve's test points, read at %d settings, read right (the valve's share of the branch differential changed with its setting as this resistance gives: test points off %.1f %%)", v.Settings, 100*v.Weight)
		}
	}
	for i, v := range j.testPoints {
		if !tpOff(v) {
			continue
		}
		id := m.Branches[i].ID
		j.Params.Resistance[i] = v.Ratio
		// On its table: an offset or one Kv the fit put it at explained
		// the readings the test points got wrong.
		j.Params.KvScale[i] = 1
		way := "low"
		if v.Off > 0 {
			way = "high"
		}
		add = append(add, diagnose.Finding{Code: diagnose.SuspectReading, Severity: diagnose.Fault, Branch: id, Reading: "flow and valve diff by the valve's test points",
			Message: fmt.Sprintf("its valve's test points read the flow about %.0f %% %s (a partly blocked tapping, air in a sensing line or a meter off its calibration); the branch itself is near %.2f times its design resistance", 100*math.Abs(v.Off), way, v.Ratio),
			Evidence: fmt.Sprintf("read at %d valve settings: the valve's share of the branch differential changed with its setting as a branch at %.2f times design gives, with every valve differential read %.0f %% %s; a branch at %.2f times design read right fits worse (test points off %.1f %%)",
				v.Settings, v.Ratio, 100*math.Abs((1+v.Off)*(1+v.Off)-1), map[bool]string{true: "high", false: "low"}[v.Off > 0], v.RatioRight, 100*v.Weight),
			Confidence: v.Weight,
			Action:     "check the test points and the meter, and read the flow with a clamp-on to confirm; the plan takes the branch at the resistance above, not at its readings"})
	}
	if len(add) > 0 {
		slices.SortFunc(add, func(a, b diagnose.Finding) int { return mustIndex(m, a.Branch) - mustIndex(m, b.Branch) })
		j.Findings = append(j.Findings, add...)
		slices.SortStableFunc(j.Findings, func(a, b diagnose.Finding) int { return int(b.Severity) - int(a.Severity) })
	}
}

// likelyOff names, on each branch whose test points the readings at several
// settings find more likely off than right but do not decide, the test
// points as the finding: its finding of a branch off design (restricted,
// free, valve off its mark or seized) becomes one of its test points
// likely reading off, the explanation it replaced named as the other. Run
// once the plan is made: the plan hedges such a branch between the two on
// its finding. On the independent test plants, 9 of the 10 branches so
// weighed were under test points reading off.
func likelyOff(j *job) {
	done := map[string]bool{}
	var drop []int
	for k := range j.Findings {
		f := &j.Findings[k]
		v, ok := findingTP(j, f)
		if !ok || v.Settings < 2 || tpOff(v) || v.Weight < 0.5 {
			continue
		}
		switch f.Code {
		case diagnose.Restricted, diagnose.Free, diagnose.ValveMisSet, diagnose.ValveStuck:
		default:
			continue
		}
		if done[f.Branch] {
			drop = append(drop, k) // one finding a branch
			continue
		}
		done[f.Branch] = true
		way := "low"
		if v.Off > 0 {
			way = "high"
		}
		f.Code, f.Confidence, f.Reading = diagnose.SuspectReading, v.Weight, "flow and valve diff by the valve's test points"
		f.Message = fmt.Sprintf("its valve's test points most likely read the flow about %.0f %% %s, the branch then near %.2f times its design resistance; else %s", 100*math.Abs(v.Off), way, v.Ratio, f.Message)
		f.Evidence += fmt.Sprintf("; read at %d valve settings, the valve's share of the branch differential changed with its setting more as test points off give than as this does (test points off %.0f %%, not enough to decide)", v.Settings, 100*v.Weight)
	}
	for _, k := range slices.Backward(drop) {
		j.Findings = slices.Delete(j.Findings, k, k+1)
	}
}

// findingTP is the weighing of the test points of finding f's branch, if
// they were weighed.
func findingTP(j *job, f *diagnose.Finding) (tpWeighed, bool) {
	i, ok := j.L.Model.Index(f.Branch)
	if !ok {
		return tpWeighed{}, false
	}
	v, ok := j.testPoints[i]
	return v, ok
}

// tpRightAction is a finding's action once the readings at several settings
// have confirmed the branch's own test points.
func tpRightAction(a string) string {
	if a == "" {
		return "the readings at several valve settings confirm it: the plan sets its valve for it"
	}
	return a + " (the readings at several valve settings confirm it: the plan sets its valve for it)"
}

// tpDecides is, by model index, what reading each branch after setting
// decides beyond its band (balance.ReadOptions.Decides): a branch held at
// design or hedged on its own test points alone, read so far at one
// setting, whose new setting is another. Its test points read again there
// tell the two explanations apart (calibrate.WeighTestPoints), and the
// risk removed is the chance that the plan's setting leaves it outside the
// tolerance under the explanation that holds: held, the fault's; hedged,
// each explanation's flow weighed. So also a branch on the index path found
// restricted on its own test points alone, which the plan neither holds nor
// hedges (the pump is set for it): the risk is the chance its test points
// read off (tpOdds) where it then gets more than the tolerance allows, the
// pump raised for a restriction that is not there.
//
// A branch whose new setting is one its test points were read at already
// (an index valve found fully open and planned so) learns nothing there:
// it is ranked instead to be read once at a check setting, its valve moved
// for the reading and put back (checkSetting, returned in at by model
// index, NaN for none).
func tpDecides(j *job, plan *balance.Plan, hedges []hedged) (dec []float64, why []string, at []float64) {
	if plan == nil || j.Cal == nil {
		return nil, nil, nil
	}
	m := j.L.Model
	out := func(f float64) float64 {
		if f < 1+plan.ToleranceLow || f > 1+plan.ToleranceHigh {
			return 1
		}
		return 0
	}
	// Under the restriction a trim can only open the valve: a branch that
	// fully open still falls short keeps the rest of its shortfall
	// whatever its reading decides, so the reading removes its risk only in
	// the share of the shortfall a trim recovers (recovers). Counted whole,
	// an independent 5-branch plant's held branch, fouled 3.45 times and at
	// 77 % at best, was read first, and the index's test points reading
	// 21 % low (the branch at 132 %) not at all.
	byID := map[string]balance.BranchPlan{}
	for _, b := range plan.Branches {
		byID[b.ID] = b
	}
	fitted := j.Cal.Params.Resistance
	reach := func(id string, mult float64) float64 {
		if i, ok := m.Index(id); ok {
			if b, in := byID[id]; in {
				return recovers(j, i, b, mult)
			}
		}
		return 1
	}
	risk := map[string]float64{}
	weight := map[string]float64{}
	for _, id := range j.unconfirmed {
		if i, ok := m.Index(id); ok {
			if v, ok := j.testPoints[i]; ok {
				risk[id], weight[id] = (1-v.Weight)*reach(id, fitted[i]), v.Weight
			}
		}
	}
	for _, h := range hedges {
		if !h.Meter {
			risk[h.ID], weight[h.ID] = (1-h.Weight)*out(h.IfFault)*reach(h.ID, h.Fitted)+h.Weight*out(h.IfReadings), h.Weight
		}
	}
	for _, x := range indexOnTestPoints(j, plan, func(id string) bool { _, ok := risk[id]; return ok }) {
		// The fit took the test points as right: read a flow factor
		// 1+b, the branch passes about 1/(1+b) of what it planned.
		id := j.Findings[x.finding].Branch
		risk[id], weight[id] = x.w*out(1/(1+x.o.b)), x.w
	}
	// A valve found set elsewhere than its handwheel says, read at one
	// setting: a slipped indicator (the plan's view: it follows its table
	// from its true mark) or a plug loose on its spindle, which stays
	// where it was found whatever the handwheel does. Its reading at the
	// new setting tells the two apart; under a loose plug the branch
	// keeps what it passed as found.
	loose := map[string]bool{}
	for _, b := range plan.Branches {
		i, ok := m.Index(b.ID)
		if _, done := risk[b.ID]; !ok || done || i >= len(j.Cal.Branches) || j.Cal.Branches[i].Valve.Hypothesis != calibrate.SetElsewhere || m.Branches[i].Valve == nil || math.IsNaN(b.New) {
			continue
		}
		if meterHedged(hedges, b.ID) || len(readSettings(m, i)) != 1 {
			continue
		}
		if f := looseFlow(j, i, b, readSettings(m, i)[0]); !math.IsNaN(f) {
			risk[b.ID], weight[b.ID], loose[b.ID] = plugLoose*out(f), plugLoose, true
		}
	}
	for _, b := range plan.Branches {
		r := risk[b.ID]
		i, ok := m.Index(b.ID)
		if !(r > 0) || !ok || m.Branches[i].Valve == nil || math.IsNaN(b.New) {
			continue
		}
		sets := j.testPoints[i].Sets
		if len(sets) == 0 {
			sets = readSettings(m, i)
		}
		check := math.NaN()
		if !shareMoves(j, i, b, b.New, sets) {
			// Read there already, or where the valve takes about the
			// same share of the branch differential: nothing new to
			// learn at the new setting, but at a check setting.
			if check, ok = checkSetting(j, i, b, sets); !ok {
				continue
			}
		}
		if dec == nil {
			dec, why, at = make([]float64, len(m.Branches)), make([]string, len(m.Branches)), make([]float64, len(m.Branches))
			for k := range at {
				at[k] = math.NaN()
			}
		}
		dec[i], at[i] = r, check
		what := "read at its new setting, its test points"
		if !math.IsNaN(check) {
			what = fmt.Sprintf("read once with its valve at %s (a check: record it as a state of its own, then set the valve back to %s), its test points at a second setting", settingText(check, b.Unit), settingText(b.New, b.Unit))
		}
		why[i] = fmt.Sprintf("%s tell a real restriction from themselves reading off (%.0f %% chance of the latter now): the plan cannot, and a trim then sets it", what, 100*weight[b.ID])
		if b.OnIndex {
			why[i] += " and the pump"
		}
		if loose[b.ID] {
			at := "read at its new setting"
			if !math.IsNaN(check) {
				at = fmt.Sprintf("read once with its valve at %s (a check: record it as a state of its own, then set the valve back to %s)", settingText(check, b.Unit), settingText(b.New, b.Unit))
			}
			why[i] = fmt.Sprintf("found passing what its handwheel's mark does not: %s, its flow tells a slipped indicator (it follows the handwheel) from a plug loose on its spindle (%.0f %% chance now; it keeps what it passed as found, and the others and the pump must allow for it)", at, 100*weight[b.ID])
		}
	}
	return dec, why, at
}

// plugLoose is the chance, before a second setting is read, that a valve
// found passing what another mark of its handwheel would (the fit's
// SetElsewhere) has a plug loose on its spindle rather than a slipped or
// misread indicator: the two as likely (common practice, no source).
const plugLoose = 0.5

// meterHedged reports whether the plan weighed branch id's valve set
// elsewhere against its flow meter reading off (hedgeMeters).
func meterHedged(hs []hedged, id string) bool {
	return slices.ContainsFunc(hs, func(h hedged) bool { return h.ID == id && h.Meter })
}

// looseFlow is branch i's flow over its target at the plan (b) if its plug
// stays where it was found (at setting found, with the fitted offset from
// its mark): its valve keeps that Kv at the plan's branch differential.
// NaN where it cannot be worked out.
func looseFlow(j *job, i int, b balance.BranchPlan, found float64) float64 {
	m := j.L.Model
	c, ok := planCase(m, i, b)
	v := m.ValveElement(i, found, j.Cal.Params.KvScale[i])
	if !ok || v == nil {
		return math.NaN()
	}
	d, _ := v.Drop(b.Target, m.Fluid)
	return c.FlowAt(j.Params.Resistance[i], d)
}

// planCase is branch i at the plan (b) as a balance.HedgeCase: its fixed
// parts at design against the plan's branch differential and its target;
// false where it has no fixed parts, target or differential.
func planCase(m *plant.Model, i int, b balance.BranchPlan) (balance.HedgeCase, bool) {
	fixed := m.FixedElement(i, 1)
	if fixed == nil || !(b.Target > 0) || !(b.BranchDiff > 0) {
		return balance.HedgeCase{}, false
	}
	return balance.HedgeCase{Rest: func(q float64) (float64, float64) { return fixed.Drop(q, m.Fluid) }, Diff: b.BranchDiff, Target: b.Target}, true
}

// recovers is the share of branch i's shortfall under a restriction (its
// fixed parts mult times design) that opening its valve fully recovers, at
// the branch differential the plan gives it (b): 1 where the valve at the
// plan's setting already passes the target or opening it reaches it, 0
// where opening gains nothing; 1 where it cannot be worked out.
func recovers(j *job, i int, b balance.BranchPlan, mult float64) float64 {
	m := j.L.Model
	c, ok := planCase(m, i, b)
	_, hi := m.Branches[i].Valve.Range()
	open := m.ValveElement(i, hi, j.Params.KvScale[i])
	set := m.ValveElement(i, b.New, j.Params.KvScale[i])
	if !ok || open == nil || set == nil {
		return 1
	}
	dSet, _ := set.Drop(b.Target, m.Fluid)
	dOpen, _ := open.Drop(b.Target, m.Fluid)
	now := c.FlowAt(mult, dSet)
	if now >= 1 {
		return 1
	}
	return math.Max(0, math.Min(1, (c.FlowAt(mult, dOpen)-now)/(1-now)))
}

// readSettings are the settings branch i's valve was found or moved to in
// the survey states that read the branch.
func readSettings(m *plant.Model, i int) []float64 {
	id := m.Branches[i].ID
	var out []float64
	for _, st := range m.States {
		read := slices.ContainsFunc(st.Readings, func(ri int) bool { return m.Site.Readings[ri].Where == id })
		if read && !slices.Contains(out, st.Settings[i]) {
			out = append(out, st.Settings[i])
		}
	}
	return out
}

// checkShare is the share of the branch differential a check setting gives
// the valve on the fit's view: test points reading a flow factor 1+b read
// the valve's differential (1+b)² times and leave the branch's alone, so
// the two explanations part by about (1 - (1+b)^-2) times the change in the
// valve's differential between two settings. At a third of the branch's, a
// 20 % error parts them by some 10 % of the branch differential, many times
// a gauge's uncertainty, while the branch keeps over four fifths of its
// flow (common practice, no source).
const checkShare = 1.0 / 3

// shareStep is the least change in the valve's share of the branch
// differential between two settings for its test points read at both to
// decide: a 20 % error then parts the explanations by 1.5 % of the branch
// differential, about twice the standard uncertainty of a gauge good to
// ±(0.5 kPa + 1 %) at k = 2 on 100-200 kPa (common practice, no source).
const shareStep = 0.05

// valveShare is the share of the branch differential branch i's valve takes
// at setting s, on the fit's view at the branch's target flow (b).
func valveShare(j *job, i int, b balance.BranchPlan, s float64) float64 {
	m := j.L.Model
	fixed := m.FixedElement(i, j.Params.Resistance[i])
	kv, err := m.Branches[i].Valve.KvAt(s)
	if fixed == nil || err != nil || !(kv > 0) || !(b.Target > 0) {
		return math.NaN()
	}
	df, _ := fixed.Drop(b.Target, m.Fluid)
	q := b.Target * 3600 / (kv * j.Params.KvScale[i]) // m3/h over Kv
	dv := 1e5 * q * q
	return dv / (dv + df)
}

// shareMoves reports whether the valve of branch i at setting s takes a
// share of the branch differential at least shareStep away from its share
// at every setting read so far.
func shareMoves(j *job, i int, b balance.BranchPlan, s float64, read []float64) bool {
	at := valveShare(j, i, b, s)
	return !math.IsNaN(at) && !slices.ContainsFunc(read, func(r float64) bool {
		return !(math.Abs(valveShare(j, i, b, r)-at) >= shareStep)
	})
}

// checkSetting is where branch i's valve is read once more for its test
// points to decide (tpDecides): the setting, on its handwheel's marks, at
// which the valve takes checkShare of the branch differential at the
// branch's target flow, on the fit's view. ok is false where its share
// there does not move from every setting read so far (shareMoves).
func checkSetting(j *job, i int, b balance.BranchPlan, read []float64) (float64, bool) {
	m := j.L.Model
	v := m.Branches[i].Valve
	fixed := m.FixedElement(i, j.Params.Resistance[i])
	if fixed == nil || !(b.Target > 0) {
		return 0, false
	}
	df, _ := fixed.Drop(b.Target, m.Fluid)
	dv := df * checkShare / (1 - checkShare)
	kv := b.Target * 3600 / math.Sqrt(dv/1e5) / j.Params.KvScale[i] // the handwheel's table
	s, err := v.SettingFor(kv)
	if err != nil {
		return 0, false
	}
	lo, hi := v.Range()
	if r := v.Resolution(); r > 0 {
		s = math.Round(s/r) * r
	}
	s = math.Max(lo, math.Min(hi, s))
	return s, shareMoves(j, i, b, s, read)
}

// indexTP is a finding of a restriction on the plan's index path read
// through the branch's own valve's test points alone: the finding's index
// in job.Findings, and the branch's test points weighed (tpOdds), w the
// chance they read off.
type indexTP struct {
	finding int
	o       tpOdd
	w       float64
}

// indexOnTestPoints lists the restrictions (or shortfalls of design) found
// on the plan's index path through the branch's own valve's test points
// alone, no flow read another way, which the plan neither holds nor
// hedges (skip says which it does): the pump is set for them.
func indexOnTestPoints(j *job, plan *balance.Plan, skip func(id string) bool) []indexTP {
	if plan == nil || j.Cal == nil {
		return nil
	}
	m := j.L.Model
	indep := j.flowReadAnotherWay()
	index := map[string]bool{}
	for _, b := range plan.Branches {
		index[b.ID] = b.OnIndex
	}
	var out []indexTP
	for k, f := range j.Findings {
		if f.Code != diagnose.Restricted && f.Code != diagnose.CannotReachDesign || !index[f.Branch] || indep[f.Branch] || skip(f.Branch) {
			continue
		}
		i, ok := m.Index(f.Branch)
		if !ok || m.Branches[i].Valve == nil || m.Branches[i].Riser() {
			continue
		}
		if o, ok := tpOdds(j, i); ok && o.wFault+o.wReads > 0 && o.b > -1 {
			out = append(out, indexTP{finding: k, o: o, w: o.wReads / (o.wFault + o.wReads)})
		}
	}
	return out
}
