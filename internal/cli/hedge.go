package cli

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"flowset/internal/balance"
	"flowset/internal/calibrate"
	"flowset/internal/diagnose"
	"flowset/internal/parallel"
	"flowset/internal/site"
)

// Test points that read wrong (calibrate.TestPointShare): the second
// explanation of a branch found restricted through its own valve's test
// points alone. At one valve setting no reading at the branch tells the two
// apart; at several, calibrate.WeighTestPoints does.
const (
	// hedgeSpread is the standard deviation, as a fraction of flow, of what
	// else moves a branch after setting: the valve's Kv tolerance (2.9 %,
	// see calibrate.DefaultPriorKv) and the headers, about 2.5 % (common
	// practice, no source).
	hedgeSpread = 0.025
)

// hedged records a branch planned between two explanations.
type hedged struct {
	ID                  string
	Fitted, Planned     float64 // multipliers on the fixed parts
	Low                 float64 // how far low its test points would read the flow, as a fraction
	Weight              float64 // posterior probability of the readings being wrong
	IfFault, IfReadings float64 // flow as a fraction of target under each
	// Meter marks a valve found set elsewhere that a biased flow meter
	// explains as well (hedgeMeters): Low is then how far the meter would
	// read off (negative low), Weight the probability of that, Other the
	// multiplier under it, IfFault the flow if the valve was set elsewhere
	// and IfReadings if the meter is off. Decided marks the meter's
	// explanation taken alone, the readings telling the two apart.
	Meter, Decided bool
	Other          float64
}

// hedgeTestPoints weighs each branch found restricted (or short of design)
// through its own valve's test points alone against those test points
// reading low, and plans its setting for the least expected squared
// departure from target over the two (balance.Hedge). The weights are the
// explanations' marginal likelihoods of the branch's data-only estimate
// (Kass and Raftery, J. Am. Stat. Assoc. 90, 1995): the fault component of
// the fit's prior mixture, and the test-point error carried into the same
// estimate (a uniform prior on the error, through the Jacobian of the
// apparent multiplier). It changes j.Params and returns the branches
// moved.
func hedgeTestPoints(j *job, plan *balance.Plan, held []string) []hedged {
	if j.Cal == nil || j.Before == nil || plan == nil {
		return nil
	}
	m := j.L.Model
	indep := j.flowReadAnotherWay()
	skip := map[string]bool{}
	for _, id := range held {
		skip[id] = true
	}
	byID := map[string]*balance.BranchPlan{}
	for k := range plan.Branches {
		byID[plan.Branches[k].ID] = &plan.Branches[k]
	}
	// The branches to weigh, in the findings' order; each is weighed on
	// its own multipliers alone, so side by side, and the results are
	// applied in that order.
	type weighed struct {
		id                  string
		i                   int
		mf, b, wFault, wRds float64
		mReads              float64 // the multiplier if the test points read off
		c                   balance.HedgeCase
		res                 balance.HedgeResult
		err                 error
	}
	var ws []weighed
	for _, f := range j.Findings {
		if f.Code != diagnose.Restricted && f.Code != diagnose.CannotReachDesign || indep[f.Branch] || skip[f.Branch] {
			continue
		}
		skip[f.Branch] = true
		i, ok := m.Index(f.Branch)
		bp := byID[f.Branch]
		if !ok || bp == nil || m.Branches[i].Valve == nil || m.Branches[i].Riser() || bp.OnIndex || !(bp.Target > 0) {
			continue
		}
		o, ok := tpOdds(j, i)
		if !ok {
			continue
		}
		fixed := m.FixedElement(i, 1)
		_, hi := m.Branches[i].Valve.Range()
		open := m.ValveElement(i, hi, j.Params.KvScale[i])
		if open == nil {
			continue
		}
		openDrop, _ := open.Drop(bp.Target, m.Fluid)
		ws = append(ws, weighed{id: f.Branch, i: i, mf: o.mf, b: o.b, wFault: o.wFault, wRds: o.wReads, mReads: o.mReads, c: balance.HedgeCase{
			Rest:   func(q float64) (float64, float64) { return fixed.Drop(q, m.Fluid) },
			Diff:   bp.BranchDiff,
			Target: bp.Target,
			Open:   openDrop,
			Low:    plan.ToleranceLow, High: plan.ToleranceHigh, Spread: hedgeSpread,
		}})
	}
	parallel.For(parallel.Workers(j.opts.workers), len(ws), func(_, k int) {
		w := &ws[k]
		w.res, w.err = balance.Hedge(w.c, []balance.Hypothesis{{Multiplier: w.mf, Weight: w.wFault}, {Multiplier: w.mReads, Weight: w.wRds}})
	})
	var out []hedged
	for _, w := range ws {
		if w.err != nil || math.Abs(math.Log(w.res.Multiplier/w.mf)) < 0.01 {
			continue
		}
		j.Params.Resistance[w.i] = w.res.Multiplier
		out = append(out, hedged{ID: w.id, Fitted: w.mf, Planned: w.res.Multiplier, Low: -w.b, Weight: w.wRds / (w.wFault + w.wRds), IfFault: w.res.Flows[0], IfReadings: w.res.Flows[1]})
	}
	return out
}

// hedgeIndexFindings states the confidence of each restriction found on
// the plan's index path through the branch's own valve's test points alone
// (indexOnTestPoints), which the plan neither holds nor hedges but sets
// the pump for, with those test points weighed, as hedgeNotes does for the
// hedged ones: the fit's confidence, the readings taken as right, times the
// chance the test points read right. Its action is then a flow read
// another way first: clearing a restriction that is not there changes
// nothing, and the pump stays raised for it.
func hedgeIndexFindings(j *job, plan *balance.Plan, hs []hedged) {
	skip := map[string]bool{}
	for _, id := range j.unconfirmed {
		skip[id] = true
	}
	for _, h := range hs {
		skip[h.ID] = true
	}
	for _, x := range indexOnTestPoints(j, plan, func(id string) bool { return skip[id] }) {
		f := &j.Findings[x.finding]
		if c := f.Confidence; c > 0 && x.w >= 0 && x.w <= 1 {
			f.Confidence = c * (1 - x.w)
			f.Evidence += fmt.Sprintf("; or its test points read %.0f %% low (a %.0f %% chance)", 100*math.Abs(x.o.b), 100*x.w)
			f.Action = fmt.Sprintf("read its flow with a clamp-on meter before anything else: only its valve's test points say it is restricted, test points reading %.0f %% low say the same, and the pump is set for it as the index circuit", 100*math.Abs(x.o.b))
			j.noteTestPointsLow(f.Branch, x.o.b)
		}
	}
}

// noteTestPointsLow records that branch id's restriction is found through
// its own valve's test points alone, which reading low by the fraction b
// would explain as well (job.tpLow).
func (j *job) noteTestPointsLow(id string, b float64) {
	if j.tpLow == nil {
		j.tpLow = map[string]float64{}
	}
	j.tpLow[id] = math.Abs(b)
}

// tpOdds is branch i's two explanations of a restriction read through its
// own valve's test points alone, as hedgeTestPoints weighs them.
type tpOdd struct {
	mf, mReads     float64 // the multipliers on the fixed parts under each
	b              float64 // the test points' error of the flow if they read off
	wFault, wReads float64 // unnormalised weights
}

// tpOdds weighs branch i, found restricted (or short of design) through its
// own valve's test points alone, against those test points reading low: the
// explanations' marginal likelihoods of the branch's data-only estimate, or
// where it was read at several settings (undecided) the weighing's own. ok
// is false where the branch is not so weighed (decided, not above design, a
// differential missing, an error beyond calibrate.TestPointMax).
func tpOdds(j *job, i int) (tpOdd, bool) {
	m := j.L.Model
	bf := j.Cal.Branches[i]
	o := tpOdd{mf: j.Params.Resistance[i], mReads: 1}
	tv, ok := j.testPoints[i]
	if ok && (tpOff(tv) || tpRight(tv)) {
		return o, false
	}
	several := ok && tv.Settings >= 2
	ln, sd := bf.DataLn, bf.DataSD
	if math.IsNaN(ln) {
		ln, sd = math.Log(o.mf), 0
	}
	if !(o.mf > 1) || !(ln > 0) {
		return o, false
	}
	dv, db := j.Before.ValveDiff(i), j.Before.BranchDiff(i)
	if m.FixedElement(i, 1) == nil || !(dv > 0) || !(db > dv) {
		return o, false
	}
	// Test points reading a flow factor 1+b read the valve differential
	// (1+b)² times and the branch's total resistance (1+b)^-2 times its
	// own; the valve's resistance is unchanged. With φ the valve's share
	// of the branch differential as read, the fixed parts then appear
	// multiplied by m = (c - φ₀)/(1 - φ₀), φ₀ = φ/c, c = (1+b)^-2: so
	// c = m/(1 - φ + mφ).
	phi := dv / db
	mm := math.Exp(ln)
	c := mm / (1 - phi + mm*phi)
	o.b = 1/math.Sqrt(c) - 1
	if math.Abs(o.b) > calibrate.TestPointMax && !several {
		return o, false
	}
	jac := 0.5 / math.Sqrt(c) * (1 - phi) / (1 - phi + mm*phi) // |db/d ln m|
	o.wFault = calibrate.DefaultFaultShare * normalPDF(ln, math.Hypot(calibrate.DefaultPriorResistance, sd))
	o.wReads = calibrate.TestPointShare / (2 * calibrate.TestPointMax) * jac
	if several {
		// Read at several settings but not decided: the weighing
		// of every state, its multipliers under each explanation.
		o.wFault, o.wReads, o.mf, o.mReads, o.b = 1-tv.Weight, tv.Weight, tv.RatioRight, tv.Ratio, tv.Off
	}
	return o, true
}

// hedgeMeters weighs each valve the fit found set elsewhere on the evidence
// of an independent flow reading that a biased meter explains as well
// (calibrate.ValveVerdict.MeterWeight): the valve set elsewhere makes the
// branch's fixed parts the fitted multiple of design, the meter off leaves
// them near design (MeterRatio) with the valve on its table. Either way the
// valve is set afresh from its table, so the two differ only in the
// multiplier on the fixed parts, and its setting is planned for the least
// expected loss over the two (balance.Hedge), weighted by the fit's
// posterior. It changes j.Params and returns the branches moved.
func hedgeMeters(j *job, plan *balance.Plan, skip map[string]bool) []hedged {
	if j.Cal == nil || plan == nil {
		return nil
	}
	m := j.L.Model
	byID := map[string]*balance.BranchPlan{}
	for k := range plan.Branches {
		byID[plan.Branches[k].ID] = &plan.Branches[k]
	}
	var out []hedged
	for i, bf := range j.Cal.Branches {
		v := bf.Valve
		w := v.MeterWeight
		if v.Hypothesis != calibrate.SetElsewhere || !(w > 0) || !(v.MeterRatio > 0) || skip[bf.ID] {
			continue
		}
		bp := byID[bf.ID]
		if bp == nil || m.Branches[i].Valve == nil || m.Branches[i].Riser() || !(bp.Target > 0) {
			continue
		}
		if bp.OnIndex && w < calibrate.MeterDecides {
			// A hedge holds the branch's differential, which on the index
			// path the branch itself sets (as in hedgeTestPoints).
			continue
		}
		mf := j.Params.Resistance[i]
		fixed := m.FixedElement(i, 1)
		_, hi := m.Branches[i].Valve.Range()
		open := m.ValveElement(i, hi, j.Params.KvScale[i])
		if fixed == nil || open == nil {
			continue
		}
		openDrop, _ := open.Drop(bp.Target, m.Fluid)
		hs := []balance.Hypothesis{{Multiplier: mf, Weight: 1 - w}, {Multiplier: v.MeterRatio, Weight: w}}
		if w >= calibrate.MeterDecides {
			// The readings tell them apart: the meter's explanation alone.
			hs = hs[1:]
		}
		res, err := balance.Hedge(balance.HedgeCase{
			Rest:   func(q float64) (float64, float64) { return fixed.Drop(q, m.Fluid) },
			Diff:   bp.BranchDiff,
			Target: bp.Target,
			Open:   openDrop,
			Low:    plan.ToleranceLow, High: plan.ToleranceHigh, Spread: hedgeSpread,
		}, hs)
		// A decided branch is reported even where its multiplier hardly
		// moves: its finding must still name the meter.
		if err != nil || len(hs) == 2 && math.Abs(math.Log(res.Multiplier/mf)) < 0.01 {
			continue
		}
		j.Params.Resistance[i] = res.Multiplier
		// The meter reads the flow the valve's table gives for its
		// differential times the Kv scale fitted under set elsewhere.
		low, ok := meterError(j, i)
		if !ok {
			low = bf.KvScale - 1
		}
		h := hedged{ID: bf.ID, Fitted: mf, Planned: res.Multiplier, Other: v.MeterRatio, Low: low, Weight: w, IfReadings: res.Flows[len(res.Flows)-1], Meter: true}
		if len(res.Flows) == 2 {
			h.IfFault = res.Flows[0]
		} else {
			h.Decided = true
		}
		out = append(out, h)
	}
	return out
}

// hedgeListed is the number of hedged branches the plan's warnings word one
// by one; beyond it they are one warning naming them, each branch's
// outcomes staying in its finding.
const hedgeListed = 5

// hedgeNotes words the hedged branches for the plan's warnings and sets
// their findings' actions: each valve weighed against its flow meter
// (hedgeMeters) one by one, then the branches found restricted on their own
// test points.
func hedgeNotes(j *job, hs []hedged) []string {
	var meters, notes, ids []string
	var points []hedged
	for _, h := range hs {
		if h.Meter {
			meters = append(meters, meterNote(j, h))
			continue
		}
		points = append(points, h)
		ids = append(ids, h.ID)
		notes = append(notes, fmt.Sprintf("%s reads as %.2g times its design resistance through its own valve's test points alone, and test points reading %.0f %% low would read the same way (a %.0f %% chance against the restriction's %.0f %%): its setting is planned between the two, to give %.0f %% of target if the restriction is real and %.0f %% if the test points read low. Read its flow with a clamp-on meter and re-plan with that reading", h.ID, h.Fitted, 100*math.Abs(h.Low), 100*h.Weight, 100*(1-h.Weight), 100*h.IfFault, 100*h.IfReadings))
	}
	// The test points' findings in one pass over the findings (a pass per
	// hedged branch was quadratic on a large site); a branch is weighed
	// one way only (hedgeMeters skips the test points' branches).
	byID := make(map[string]*hedged, len(points))
	for k := range points {
		byID[points[k].ID] = &points[k]
	}
	for k := range j.Findings {
		f := &j.Findings[k]
		if h := byID[f.Branch]; h != nil && (f.Code == diagnose.Restricted || f.Code == diagnose.CannotReachDesign) {
			// Its confidence is the fit's on the readings taken as right,
			// times the chance the test points read right: on the 70
			// independent test plants 73 % of the restrictions found on
			// test points alone were real against the 100 % the fit gave.
			if c := f.Confidence; c > 0 && h.Weight >= 0 && h.Weight <= 1 {
				f.Confidence = c * (1 - h.Weight)
				f.Evidence += fmt.Sprintf("; or its test points read %.0f %% low (a %.0f %% chance)", 100*math.Abs(h.Low), 100*h.Weight)
			}
			j.noteTestPointsLow(f.Branch, h.Low)
			f.Action = fmt.Sprintf("read its flow with a clamp-on meter before anything else: only its valve's test points say it is restricted, and test points reading %.0f %% low say the same; its setting is planned between the two (%.0f %% of target if the restriction is real, %.0f %% if the test points read low) until a second instrument tells", 100*math.Abs(h.Low), 100*h.IfFault, 100*h.IfReadings)
		}
	}
	if len(points) <= hedgeListed {
		return append(meters, notes...)
	}
	named := strings.Join(ids[:hedgeListed], ", ")
	return append(meters, fmt.Sprintf("%d branches (%s and %d more) read as restricted through their own valves' test points alone, which test points reading low would match as well: their settings are planned between the two explanations, and each one's finding says what it gets under either. Read their flows with a clamp-on meter and re-plan with those readings", len(points), named, len(points)-hedgeListed))
}

// meterNote words a valve weighed against its flow meter for the plan's
// warnings, and sets its findings' wording and actions.
func meterNote(j *job, h hedged) string {
	off := fmt.Sprintf("%.0f %% %s", 100*math.Abs(h.Low), lowHigh(h.Low))
	odds := fmt.Sprintf("%.0f %% against %.0f %%", 100*h.Weight, 100*(1-h.Weight))
	var note, msg, act string
	if h.Decided {
		note = fmt.Sprintf("%s's valve reads as set elsewhere than recorded through its flow reading alone, but the valve where recorded with the flow meter reading %s fits the readings better (%s): its setting is planned for that. Check the meter's set-up (pipe size, wall, spacing) or read the flow another way", h.ID, off, odds)
		msg = "the flow meter most likely reads off; else the valve does not sit at its recorded setting"
		act = fmt.Sprintf("check the meter's set-up (pipe size, wall, transducer spacing) or read the flow another way: a meter %s with the valve where recorded fits the readings better than the valve set elsewhere (%s), and its setting is planned for that", off, odds)
	} else {
		note = fmt.Sprintf("%s's valve reads as set elsewhere than recorded through its flow reading alone, and the flow meter reading %s with the valve where recorded would read the same way (%s): its setting is planned between the two, to give %.0f %% of target if the valve was set elsewhere and %.0f %% if the meter is off. Check the meter's set-up (pipe size, wall, spacing) or read the flow another way, and re-plan with that reading", h.ID, off, odds, 100*h.IfFault, 100*h.IfReadings)
		msg = "the valve does not sit at its recorded setting, or else the flow meter reads off: the readings fit either"
		act = fmt.Sprintf("check the meter's set-up (pipe size, wall, transducer spacing) or read the flow another way before anything else, then the handwheel's memory stop; a meter %s explains the readings as well as the valve set elsewhere (%s), and its setting is planned between the two (%.0f %% of target if set elsewhere, %.0f %% if the meter is off)", off, odds, 100*h.IfFault, 100*h.IfReadings)
	}
	// The finding names the likelier explanation: the flow meter off,
	// where that is ahead (on the independent test plants every valve so
	// weighed, 60 of them, was under a meter reading off), a reading to
	// check rather than a valve to reset; decided, the branch is then near
	// design, and the restriction or freedom the valve set elsewhere made
	// of it goes.
	meter := h.Weight >= 0.5
	j.Findings = slices.DeleteFunc(j.Findings, func(f diagnose.Finding) bool {
		return h.Decided && f.Branch == h.ID && (f.Code == diagnose.Restricted || f.Code == diagnose.Free)
	})
	for k := range j.Findings {
		f := &j.Findings[k]
		if f.Branch != h.ID {
			continue
		}
		switch f.Code {
		case diagnose.ValveMisSet:
			f.Message, f.Action = msg, act
			if meter {
				f.Code, f.Reading, f.Confidence = diagnose.SuspectReading, "flow by "+meterOf(j, h.ID), h.Weight
				f.Evidence += fmt.Sprintf("; or, the valve where recorded, its flow meter %s (%s)", off, odds)
				if !h.Decided {
					f.Message = "the flow meter reads off, or else the valve does not sit at its recorded setting: the readings fit either, the meter a little better"
				}
			}
		case diagnose.Restricted, diagnose.Free, diagnose.CannotReachDesign:
			f.Action = fmt.Sprintf("read its flow another way before cleaning anything: with the valve where recorded and the flow meter %s, the branch is %.2g times its design resistance", off, h.Other)
		}
	}
	return note
}

// meterError is how far branch i's flow meter reads off (a fraction of the
// flow) with its valve on its table: in each state where both were read,
// the flow through the table at the valve differential read against the
// meter's, the square law at the valve (IEC 60534-2-1's Kv), averaged in
// ln over the states. The fit's Kv scale with the valve set elsewhere is
// the same factor only while the fit keeps the meter's flow, which its
// outlier test may set aside.
func meterError(j *job, i int) (float64, bool) {
	m := j.L.Model
	id := m.Branches[i].ID
	var sum float64
	n := 0
	for _, st := range m.States {
		q, dp, set := math.NaN(), math.NaN(), st.Settings[i]
		for _, ri := range st.Readings {
			r := &j.L.Site.Readings[ri]
			switch {
			case r.Where != id || r.Bypass:
			case r.What == site.ValveDiff:
				dp = r.Value
				if !math.IsNaN(r.Setting) {
					set = r.Setting
				}
			case r.What == site.Flow && r.Instrument != "valve-meter":
				q = r.Value
			}
		}
		v := m.ValveElement(i, set, 1)
		if !(q > 0) || !(dp > 0) || v == nil {
			continue
		}
		d, _ := v.Drop(q, m.Fluid)
		if !(d > 0) {
			continue
		}
		sum += 0.5 * math.Log(d/dp)
		n++
	}
	if n == 0 {
		return 0, false
	}
	return math.Exp(sum/float64(n)) - 1, true
}

// meterOf names the instrument that read branch id's flow other than its
// valve's test points ("its flow meter" if none is named).
func meterOf(j *job, id string) string {
	for _, r := range j.L.Site.Readings {
		if r.Where == id && r.What == site.Flow && r.Instrument != "valve-meter" && r.Instrument != "" {
			return r.Instrument
		}
	}
	return "its flow meter"
}

// lowHigh words the sign of a reading's error.
func lowHigh(e float64) string {
	if e < 0 {
		return "low"
	}
	return "high"
}

func normalPDF(x, sd float64) float64 {
	return math.Exp(-0.5*(x/sd)*(x/sd)) / (sd * math.Sqrt(2*math.Pi))
}
