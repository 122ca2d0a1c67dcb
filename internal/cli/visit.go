package cli

import (
	"cmp"
	"context"
	"fmt"
	"math"
	"regexp"
	"slices"
	"strconv"
	"strings"

	"flowset/internal/balance"
	"flowset/internal/diagnose"
	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/report"
	"flowset/internal/site"
)

// maxRemedies is the most faults given a plan of their own to say what
// fixing each one saves; beyond it only the combined saving is given.
const maxRemedies = 10

// remedy is what putting one or more faults right would change: the plan on
// the repaired model and the flows at the present settings once repaired.
type remedy struct {
	Plan *balance.Plan
	Now  *plant.Solved // the as-found state on the repaired model
}

// remedies works out, for every restricted branch (and for all of them
// together), the plan and the present flows once the branch is cleaned back
// to its design resistance. It only calls the plan and the solver with other
// multipliers; nothing here changes how either computes.
func (j *job) remedies(ctx context.Context, st *stages) error {
	restricted := j.restricted()
	if len(restricted) == 0 || j.Cal == nil {
		return nil
	}
	j.Remedy = map[string]*remedy{}
	// A remedy's plan is read for its settings, pump and saving only:
	// its uncertainty band and the robust check (which set nothing else)
	// are left out, half of each such plan's time on a large site.
	opts := j.planOptions()
	opts.Uncertainty = nil
	// Each remedy works on its own copies of the multipliers, so they run
	// side by side (at most a worker each: every one holds a plan's
	// memory); the last is the one for every repair at once.
	var sets [][]int
	if len(restricted) <= maxRemedies {
		for _, i := range restricted {
			sets = append(sets, []int{i})
		}
	}
	sets = append(sets, restricted)
	rs, errs := each(st, len(sets), func(k int) (*remedy, error) {
		p := j.Params.Clone()
		f := j.Fitted.Clone()
		for _, i := range sets[k] {
			p.Resistance[i] = 1
			f.Resistance[i] = 1
		}
		o := *opts
		pl, err := balance.Compute(ctx, j.L.Model, p, &o)
		if err != nil {
			return nil, err
		}
		now, err := j.L.Model.Solve(ctx, f, j.Before.State)
		if err != nil {
			return nil, err
		}
		return &remedy{Plan: pl, Now: now}, nil
	})
	last := len(sets) - 1
	for k, r := range rs[:last] {
		if errs[k] != nil {
			return &dataError{fmt.Errorf("plan after cleaning %s: %w", j.L.Model.Branches[sets[k][0]].ID, errs[k])}
		}
		j.Remedy[j.L.Model.Branches[sets[k][0]].ID] = r
	}
	if errs[last] != nil {
		return &dataError{fmt.Errorf("plan after the repairs: %w", errs[last])}
	}
	j.Remedy[""] = rs[last]
	return nil
}

// restricted lists the model indices of the branches found restricted, in
// the findings' order.
func (j *job) restricted() []int {
	var out []int
	for _, f := range j.Findings {
		if f.Code != diagnose.Restricted {
			continue
		}
		if i := j.branchIndex(f.Branch); i >= 0 {
			out = append(out, i)
		}
	}
	return out
}

// repairs is how many plans remedies makes: one per restricted branch (up
// to maxRemedies) and one for all of them; none without a fit.
func (j *job) repairs() int {
	n := len(j.restricted())
	switch {
	case n == 0 || j.Cal == nil:
		return 0
	case n <= maxRemedies:
		return n + 1
	}
	return 1
}

// branchIndex is the model index of branch id, or -1.
func (j *job) branchIndex(id string) int {
	if i, ok := j.L.Model.Index(id); ok {
		return i
	}
	return -1
}

// pumpBefore is the pump's duty as found (flow, differential) as the plan
// worked it out, so the pump step and the energy figures quote one duty;
// the as-found solve where the plan has none.
func (j *job) pumpBefore() (flow, diff float64) {
	if pp := j.Plan.Pump; pp.HaveBefore {
		return pp.Before.Flow, pp.Before.Differential
	}
	return j.Before.TotalFlow(), j.Before.PumpDiff()
}

// short reports whether the plan cannot meet its targets.
func (j *job) short() bool { return len(j.Plan.Unmet) > 0 }

// visit lays the job out in the order of work on site. The report's first
// pages and the console summary are both drawn from it, so they count the
// same branches (risers included) and quote the same numbers.
func (j *job) visit(u display) report.Visit {
	var v report.Visit
	m, s, plan := j.L.Model, j.L.Site, j.Plan
	v.Short = j.shortLines(u)

	// 1. Before you start.
	var controls []string
	for _, b := range s.Branches {
		if b.ControlKvs > 0 {
			controls = append(controls, b.ID)
		}
	}
	if len(controls) > 0 {
		v.BeforeStart = append(v.BeforeStart, fmt.Sprintf("Drive the control valves on %s fully open (or to manual, open) for the readings and the settings; put them back to automatic before you leave.", joinIDs(controls)))
	} else {
		v.BeforeStart = append(v.BeforeStart, "Put every control valve and thermostatic head the circuit has fully open (or to manual, open) for the readings and the settings; put them back to automatic before you leave.")
	}
	switch s.Boundary.Kind {
	case site.PumpCurve:
		v.BeforeStart = append(v.BeforeStart, fmt.Sprintf("Run the pump at the speed of the survey (%s) until step 3.", u.speed(j.Before.State.Speed)))
	default:
		v.BeforeStart = append(v.BeforeStart, fmt.Sprintf("Leave the pump holding %s at %s (as surveyed) until step 3.", u.diff(j.Before.State.Differential), sensorName(s.Boundary.Sensor)))
	}
	if len(plan.Controllers) > 0 {
		var ids []string
		for _, c := range plan.Controllers {
			ids = append(ids, c.ID)
		}
		v.BeforeStart = append(v.BeforeStart, fmt.Sprintf("Leave the differential controllers on %s at their set points as found until step 4; check that their sensing lines are open.", joinIDs(ids)))
	}
	v.BeforeStart = append(v.BeforeStart, j.suspectLines(u)...)
	v.BeforeStart = append(v.BeforeStart, j.disagreeLines(u)...)
	var undet []string
	for _, f := range j.Findings {
		if f.Code == diagnose.Undetermined {
			undet = append(undet, f.Branch)
		}
	}
	if len(undet) > 0 {
		v.BeforeStart = append(v.BeforeStart, fmt.Sprintf("The survey did not pin down %s: the plan assumes design there; read %s after setting (step 5).", joinIDs(undet), pronoun(len(undet))))
	}

	// 2. Fix first.
	v.Fixes = j.fixes(u)

	// 3. Pump, with the plan's own warnings that are not said elsewhere.
	v.Pump = j.pumpStep(u)
	v.Pump.Warnings = append(v.Pump.Warnings, j.planNotes()...)
	for _, c := range plan.Controllers {
		if c.SetPoint > c.Max {
			// The plan is for what the span needs; the controller cannot
			// be set to it.
			v.Pump.Warnings = append(v.Pump.Warnings, fmt.Sprintf("The differential controller on %s would have to hold %s across its span, above its highest set point %s: the plan is for what the span needs; set it to its highest and fit a controller with a higher range, or its branches fall short.", c.ID, u.diff(c.SetPoint), u.diff(c.Max)))
			continue
		}
		v.Pump.Warnings = append(v.Pump.Warnings, fmt.Sprintf("The differential controller on %s is planned to hold %s across its span; the pump is set to give it that plus %s for its valve wide open.", c.ID, u.diff(c.SetPoint), u.diff(c.OpenDrop)))
	}

	// 4. Valve settings.
	v.OrderReason = "Set the valves in this order: along the main headers from the pump outwards, and on a riser its branches before the riser's own valve, so each riser is one visit. Every setting comes from one calculation, so the order does not change the result; the check readings hold once every valve is set and the pump runs as in step 3."
	if len(plan.Controllers) > 0 {
		v.OrderReason += " A riser's differential controller is set with its riser: its new set point is the least that serves the branches of its span with the partner valve fully open, so the settings inside the span depend on that set point alone, and its check is the differential across the span."
	}
	v.Settings = settingsTable(plan, u, "Valve settings")
	v.Settings.WriteIn = []string{"Set", "Read after", "Initials"}
	if r := j.Remedy[""]; r != nil && settingsDiffer(plan, r.Plan) {
		v.Remedied = settingsTable(r.Plan, u, "Valve settings after the repairs in step 2")
		v.Remedied.Notes = []string{"Use these settings if every repair in step 2 is done before you set the valves; if not, use the settings above and come back to re-balance after the repair."}
		v.Remedied.WriteIn = []string{"Set", "Initials"}
	}

	// 5. Prove it.
	v.Prove = j.proveTable(u)

	// 6. Hand-over.
	v.Handover = j.handover(u)
	_ = m
	return v
}

// shortLines says what is short, why and what would fix it; nil when the
// plan meets every target.
func (j *job) shortLines(u display) []string {
	plan := j.Plan
	if !j.short() {
		return nil
	}
	var out []string
	var parts []string
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range plan.Unmet {
		lo, hi = math.Min(lo, s.Percent), math.Max(hi, s.Percent)
		if len(parts) < maxIDs {
			parts = append(parts, fmt.Sprintf("%s %s of %s (%.0f %%)", s.ID, u.flow(s.Predicted), u.flow(s.Target), s.Percent))
		}
	}
	switch n := len(plan.Unmet); {
	case n == len(plan.Branches) && n > 1:
		span := fmt.Sprintf("%.0f %% to %.0f %%", lo, hi)
		if math.Round(lo) == math.Round(hi) {
			span = fmt.Sprintf("%.0f %%", hi)
		}
		out = append(out, fmt.Sprintf("Short after the plan: every branch, at %s of its target.", span))
	case n > maxIDs:
		out = append(out, fmt.Sprintf("Short after the plan: %s and %d more.", strings.Join(parts, ", "), n-maxIDs))
	default:
		out = append(out, fmt.Sprintf("Short after the plan: %s.", strings.Join(parts, ", ")))
	}
	pp := plan.Pump
	if pp.Short {
		out = append(out, fmt.Sprintf("Why: every target needs %s at the pump at %s; at full speed (%s) it gives %s there, %s short.",
			u.diff(pp.Needed), u.flow(plan.TotalTarget()), u.speed(pp.MaxSpeed), u.diff(pp.Available), u.diff(pp.Needed-pp.Available)))
	} else if j.L.Model.PumpDriven() && finite(pp.NeededSpeed) && pp.NeededSpeed > pp.MaxSpeed {
		out = append(out, fmt.Sprintf("Why: with the valves on their handwheel marks the pump would need %s speed; it allows %s.", u.speed(pp.NeededSpeed), u.speed(pp.MaxSpeed)))
	}
	seen := map[string]bool{}
	var starved []string
	for _, s := range plan.Unmet {
		if s.Reason == balance.StarvedReason {
			if len(starved) < maxIDs {
				starved = append(starved, fmt.Sprintf("%s %s", s.ID, u.diff(s.Needs)))
			}
			continue
		}
		if s.Reason != "" && !seen[s.Reason] {
			seen[s.Reason] = true
			out = append(out, "Cause: "+s.Reason+".")
		}
	}
	if len(starved) > 0 {
		more := ""
		if n := len(plan.Unmet) - len(starved); n > 0 && len(starved) == maxIDs {
			more = " and more"
		}
		out = append(out, fmt.Sprintf("Cause: the pump gives %s flat out; the short branches need more at the pump for their targets (%s%s), so their valves are fully open.", u.diff(plan.Required), strings.Join(starved, ", "), more))
	}
	for _, r := range plan.Remedies {
		line := remedyPrefix + r.Action
		if r.Kind != balance.LargerPump && r.Saves > 0.005*r.Least {
			line += fmt.Sprintf(" (every target would then need %s instead of %s)", u.diff(r.LeastAfter), u.diff(r.Least))
		}
		if pp.Short && r.Serves && r.Kind != balance.LargerPump {
			line += "; the pump then serves every target"
		}
		out = append(out, line+".")
	}
	if plan.Share == balance.Proportional && pp.Short {
		out = append(out, "Set the valves as below all the same (shared out in proportion, as asked): every branch gets about the same fraction of its target. No energy saving is claimed.")
	} else {
		out = append(out, "Set the valves as below all the same: every other branch gets its target, and the short ones, their valves fully open, get as much as the pump can give. No energy saving is claimed.")
	}
	return out
}

// suspectLines states each suspect reading with its numbers and, where the
// evidence points to one, its usual cause.
func (j *job) suspectLines(u display) []string {
	if j.Cal == nil {
		return nil
	}
	var out []string
	byLabel := map[string]diagnose.Finding{}
	for _, f := range j.Findings {
		if f.Code == diagnose.SuspectReading {
			byLabel[f.Reading] = f
		}
	}
	for _, r := range j.Cal.Readings {
		if _, ok := byLabel[r.Pos.String()]; !ok {
			continue
		}
		sr := j.L.Site.Readings[r.Index]
		val, pred := u.diff(r.Value), u.diff(r.Predicted)
		switch {
		case sr.What.IsFlow():
			val, pred = u.flow(r.Value), u.flow(r.Predicted)
		case sr.What == site.Speed:
			val, pred = fmt.Sprintf("%.3f of rated speed", r.Value), fmt.Sprintf("%.3f", r.Predicted)
		}
		line := fmt.Sprintf("Reading %s (%s at %s, %s): read %s; the rest of the survey implies %s.", r.Pos, sr.What, sr.Where, sr.Instrument, val, pred)
		if r.Outlier {
			line += " It was left out of the calculation."
		}
		switch {
		case sr.Instrument == "valve-meter" && j.hasValveDiff(sr.Where, sr.State):
			line += " A valve-meter flow that disagrees with the valve differential read at the same time usually means the wrong valve size or model was dialled into the meter: check it, then re-read."
		case sr.Instrument == "valve-meter":
			line += " Check the valve size, model and setting dialled into the meter, then re-read."
		default:
			line += " Re-read it: check the test points, the unit and the setting noted."
		}
		out = append(out, line)
	}
	return out
}

func (j *job) hasValveDiff(where, state string) bool {
	for _, r := range j.L.Site.Readings {
		if r.Where == where && r.State == state && r.What == site.ValveDiff {
			return true
		}
	}
	return false
}

// fixes lists the faults to put right before setting, one per branch, with
// what fixing it saves and what to read after.
func (j *job) fixes(u display) []report.Fix {
	var out []report.Fix
	idx := map[string]int{}
	add := func(where, action string) *report.Fix {
		if k, ok := idx[where]; ok {
			out[k].Action += "; " + action
			return &out[k]
		}
		idx[where] = len(out)
		out = append(out, report.Fix{Where: where, Action: action})
		return &out[len(out)-1]
	}
	savedAll := false
	for _, f := range j.Findings {
		switch f.Code {
		case diagnose.Restricted:
			i := j.branchIndex(f.Branch)
			ratio := math.NaN()
			if j.Cal != nil && i >= 0 {
				ratio = j.Cal.Branches[i].Ratio
			}
			clear := fmt.Sprintf("clean the strainer, check that the isolating valves are fully open and the coil or terminal is not fouled (it passes water as if %.1f times its design resistance)", ratio)
			if low, ok := j.tpLow[f.Branch]; ok {
				// Only its own test points say so: a flow read another
				// way first, or the work may find nothing.
				clear = fmt.Sprintf("first read its flow with a clamp-on meter: only its valve's test points say it is restricted, and test points reading %.0f %% low would say the same; if the clamp-on confirms it, %s", 100*low, clear)
			}
			fx := add(f.Branch, clear)
			if r := j.Remedy[f.Branch]; r != nil {
				fx.Saves = j.saving(r.Plan, u)
				if i >= 0 {
					fx.ReadAfter = fmt.Sprintf("before touching any balancing valve, read %s's flow: about %s once clean, against %s now", f.Branch, u.flow(r.Now.Flow(i)), u.flow(j.Before.Flow(i)))
				}
			} else if r := j.Remedy[""]; r != nil && !savedAll {
				// What the repairs save together is said once, on the
				// first of them, not repeated on every one.
				fx.Saves = "with every repair in this step: " + j.saving(r.Plan, u)
				savedAll = true
			}
		case diagnose.CannotReachDesign:
			if _, ok := idx[f.Branch]; !ok {
				if c := j.controllerAbove(f.Branch); c != "" {
					add(f.Branch, fmt.Sprintf("it cannot reach its target even with its valve fully open at the present set point of the differential controller on %s: find what restricts it, or that set point must rise (step 4)", c))
					break
				}
				add(f.Branch, "it cannot reach its target even with its valve fully open at the present pump: find what restricts it, or the pump must rise (step 3)")
			}
		case diagnose.ValveStuck:
			fx := add(f.Branch, "free or replace the balancing valve: its flow did not change when its setting was changed")
			fx.ReadAfter = "move the valve and read the flow again: it must change"
		case diagnose.ValveMisSet:
			i := j.branchIndex(f.Branch)
			what := "the valve does not sit where its handwheel says"
			if j.Cal != nil && i >= 0 {
				vf := j.Cal.Branches[i].Valve
				if len(vf.Recorded) > 0 && len(vf.Implied) > 0 && finite(vf.Implied[0]) {
					unit := ""
					if mv := j.L.Model.Branches[i].ValveModel; mv != nil {
						unit = " " + mv.Unit
					}
					what = fmt.Sprintf("the valve is recorded at %g%s, but the readings say it passes water as if at about %.1f%s", vf.Recorded[0], unit, vf.Implied[0], unit)
				}
			}
			fx := add(f.Branch, what+": move its handwheel a turn and read the flow again (a plug loose from its spindle does not change it: repair it), then check the handwheel's indicator and memory stop, and that the valve fitted is the model on the sheet")
			fx.ReadAfter = "the settings in step 4 assume the valve follows its table once read correctly; read its flow after setting (step 5): unchanged from as found, its plug is loose"
		case diagnose.Free:
			add(f.Branch, "it passes more water than its design allows: look for an open bypass or a terminal that differs from the schedule")
		}
	}
	return out
}

// saving says what a repair saves in pump differential and power.
func (j *job) saving(r *balance.Plan, u display) string {
	p := j.Plan
	// A repair away from the index circuit leaves the pump's duty as it
	// is (rounding may move it a hair either way): it restores the branch,
	// it saves no pump energy, and a "saving" upwards would mislead.
	if !(r.Required < p.Required*(1-savingFloor)) {
		return "nothing on the pump: this branch does not set the pump's duty"
	}
	s := fmt.Sprintf("pump differential %s → %s", u.diff(p.Required), u.diff(r.Required))
	if p.Pump.HaveBefore && r.Pump.HaveBefore && p.Pump.ElectricalAfter > 0 {
		s += fmt.Sprintf(", pump power %s → %s", power(p.Pump.ElectricalAfter), power(r.Pump.ElectricalAfter))
	}
	return s
}

// savingFloor is the least fall in the pump's differential, as a fraction,
// worth calling a saving: less than a technician can set (common practice,
// no source).
const savingFloor = 0.005

func power(w float64) string {
	if w >= 1000 {
		return fmt.Sprintf("%.2f kW", w/1000)
	}
	return fmt.Sprintf("%.0f W", w)
}

// pumpStep is the change asked of the pump, where it is made, and what to
// check before making it.
func (j *job) pumpStep(u display) report.PumpStep {
	s, plan := j.L.Site, j.Plan
	pp := plan.Pump
	var st report.PumpStep
	switch s.Boundary.Kind {
	case site.PumpCurve:
		bq, bd := j.pumpBefore()
		rho := j.L.Model.Fluid.Density
		st.From = fmt.Sprintf("%s speed (%s at %s)", u.speed(j.Before.State.Speed), u.head(bd, rho), u.flow(bq))
		st.To = fmt.Sprintf("%s speed (%s at %s)", u.speed(plan.Speed), u.head(j.After.PumpDiff(), rho), u.flow(j.After.TotalFlow()))
		st.Where = "the pump's drive speed"
		if finite(pp.TrimRatio) {
			st.Where += fmt.Sprintf("; on a fixed-speed pump, trim the impeller to about %.1f %% of its diameter instead (approximate: trim in steps and re-test)", 100*pp.TrimRatio)
		}
		if j.After.PumpDiff() > bd*1.001 {
			st.Warnings = append(st.Warnings, fmt.Sprintf("The pump's differential rises from %s to %s: check the pressure ratings of the pipework, valves and equipment it serves before raising it.", u.diff(bd), u.diff(j.After.PumpDiff())))
		}
	default:
		st.From = fmt.Sprintf("%s at %s", u.diff(j.Before.State.Differential), sensorName(s.Boundary.Sensor))
		st.To = fmt.Sprintf("%s at %s", u.diff(pp.SetPoint), sensorName(pp.Sensor))
		st.Where = fmt.Sprintf("the differential set point of the pump's controller, its sensor at %s", sensorName(pp.Sensor))
		switch {
		case j.L.Model.Controlled() && pp.Short:
			st.Where += fmt.Sprintf("; the pump cannot give more: its drive will run flat out (%s speed)", u.speed(pp.SpeedRatio))
		case j.L.Model.Controlled() && finite(pp.SpeedRatio):
			st.Where += fmt.Sprintf("; its drive will run at about %s speed to hold it", u.speed(pp.SpeedRatio))
		default:
			st.Warnings = append(st.Warnings, fmt.Sprintf("No pump curve was given: nobody has checked that the pump can give %s at %s. Check it against the pump's own curve before relying on the plan.", u.diff(plan.Required), u.flow(plan.TotalFlow)))
		}
		if pp.SetPoint > j.Before.State.Differential*1.001 {
			st.Warnings = append(st.Warnings, fmt.Sprintf("The set point rises from %s to %s: check the pressure ratings of the pipework, valves and equipment it serves before raising it.", u.diff(j.Before.State.Differential), u.diff(pp.SetPoint)))
		}
	}
	if lift := j.L.Model.Lift(); lift > 0 {
		// An open circuit: part of what the pump gives is not friction,
		// and no balancing lowers it.
		st.Where += fmt.Sprintf("; of its differential, %s lifts the water to the open outlet (static lift and outlet pressure), which no valve setting changes", u.diff(lift))
	}
	if j.short() {
		st.Warnings = append(st.Warnings, "The pump cannot give what the targets need: see the top of this report.")
	}
	st.Pumps = j.pumpsLines(u)
	return st
}

// pumpsLines says, for a site of several pumps, which run in the plan and
// what each gives, and whether one pump fewer would give the same duty, at
// what speed and power; nil for one pump.
func (j *job) pumpsLines(u display) []string {
	m, pp := j.L.Model, j.Plan.Pump
	if !m.Several() || len(pp.Duties) == 0 {
		return nil
	}
	rho := m.Fluid.Density
	rg := rho * hydraulics.StandardGravity
	ids := func(n int) string { return joinIDs(pumpNames(m.PumpIDs[:n])) }
	var out []string
	how := "in parallel"
	if pp.Series {
		how = "in series"
	}
	line := fmt.Sprintf("%s run %s", ids(pp.Running), how)
	if pp.Running == 1 {
		line = fmt.Sprintf("%s runs", ids(1))
	}
	if pp.Running < pp.Pumps {
		rest := pumpNames(m.PumpIDs[pp.Running:])
		verb := "stand"
		if len(rest) == 1 {
			verb = "stands"
		}
		line += fmt.Sprintf(" (%s %s by)", joinIDs(rest), verb)
	}
	var shares []string
	for _, d := range pp.Duties {
		sh := fmt.Sprintf("%s %s", d.ID, u.flow(d.Flow))
		if pp.Series {
			sh = fmt.Sprintf("%s %s", d.ID, u.head(d.Head*rg, rho))
		}
		if d.Given {
			sh += fmt.Sprintf(" at %.0f %% efficiency", 100*d.Efficiency)
		}
		shares = append(shares, sh)
	}
	same := true
	for _, d := range pp.Duties[1:] {
		d0 := pp.Duties[0]
		same = same && math.Abs(d.Flow-d0.Flow) <= 1e-9*d0.Flow && math.Abs(d.Head-d0.Head) <= 1e-9*math.Abs(d0.Head) && d.Efficiency == d0.Efficiency
	}
	eff := ""
	if d := pp.Duties[0]; d.Given {
		eff = fmt.Sprintf(" at %.0f %% efficiency", 100*d.Efficiency)
	}
	switch {
	case same && pp.Series && pp.Running > 1:
		line += fmt.Sprintf(", each giving %s at %s%s.", u.head(pp.Duties[0].Head*rg, rho), u.flow(pp.After.Flow), eff)
	case same && pp.Running > 1:
		line += fmt.Sprintf(", each giving %s at %s%s.", u.flow(pp.Duties[0].Flow), u.head(pp.After.Differential, rho), eff)
	case pp.Series:
		line += fmt.Sprintf(": at %s each gives its head, %s.", u.flow(pp.After.Flow), strings.Join(shares, ", "))
	case pp.Running > 1:
		line += fmt.Sprintf(": at %s each gives its flow, %s.", u.head(pp.After.Differential, rho), strings.Join(shares, ", "))
	default:
		line += "."
	}
	out = append(out, line)
	if l := beyondLine(pp.Duties, u, "runs"); l != "" {
		out = append(out, l)
	}
	o := pp.Fewer
	if o == nil {
		return out
	}

	who, give, hold, their := ids(o.Running)+" together", "give", "hold", "their drives"
	if o.Running == 1 {
		who, give, hold, their = ids(1)+" alone", "gives", "holds", "its drive"
	}
	switch {
	case !o.Serves:
		l := fmt.Sprintf("One pump fewer would not give the planned duty: %s, flat out, %s %s at %s; the plan needs %s.",
			who, give, u.diff(o.Available), u.flow(pp.After.Flow), u.diff(pp.After.Differential))
		switch {
		case o.FlatOutBranches == 0:
		case o.FlatOutInBand == o.FlatOutBranches:
			l += fmt.Sprintf(" Flat out with the settings below it would still keep every branch within tolerance (the lowest at %.0f %% of target): a standby option if the duty's margins can be given up.", o.FlatOutLowest)
		default:
			l += fmt.Sprintf(" Flat out with the settings below it would leave %d of %d branches outside tolerance (the lowest at %.0f %% of target).", o.FlatOutBranches-o.FlatOutInBand, o.FlatOutBranches, o.FlatOutLowest)
		}
		out = append(out, l)
	case !finite(o.Electrical):
		out = append(out, fmt.Sprintf("One pump fewer would serve: %s, flat out, %s %s at %s; the plan needs %s.",
			who, give, u.diff(o.Available), u.flow(pp.After.Flow), u.diff(pp.After.Differential)))
	default:
		l := fmt.Sprintf("One pump fewer would serve: %s at %s speed %s the same duty", who, u.speed(o.Speed), give)
		if m.Controlled() {
			l = fmt.Sprintf("One pump fewer would serve: %s %s the same set point, %s at about %s speed", who, hold, their, u.speed(o.Speed))
		}
		if m.EfficiencyGiven() {
			l += fmt.Sprintf(", taking %.0f W against %.0f W", o.Electrical, pp.ElectricalAfter)
			if finite(o.AnnualEnergySaving) && math.Round(o.AnnualEnergySaving) != 0 {
				word, kwh := "saving", o.AnnualEnergySaving
				if kwh < 0 {
					word, kwh = "costing", -kwh
				}
				l += fmt.Sprintf(" (%s %.0f kWh a year)", word, kwh)
			}
			l += "."
		} else {
			l += fmt.Sprintf(", taking the same %.0f W at one efficiency for every pump (efficiency points on the pump sheet would tell the two apart).", o.Electrical)
		}
		out = append(out, l)
	}
	if l := beyondLine(o.Duties, u, "would run"); l != "" {
		out = append(out, l)
	}
	return out
}

// beyondLine names the pumps whose duty lies past the last point of their
// curve, "" for none.
func beyondLine(ds []plant.PumpDuty, u display, verb string) string {
	var ids []string
	for _, d := range ds {
		if d.Beyond {
			ids = append(ids, fmt.Sprintf("%s (%s)", d.ID, u.flow(d.Flow)))
		}
	}
	if len(ids) == 0 {
		return ""
	}
	its := "its curve"
	if len(ids) > 1 {
		its = "their curves"
		if verb == "runs" {
			verb = "run"
		}
	}
	return fmt.Sprintf("%s %s beyond the last point of %s: the curve is extrapolated there; check the pumps' own data before relying on it.", joinIDs(ids), verb, its)
}

// pumpNames names pumps by their ids ("pump 1" where the sheet gives none).
func pumpNames(ids []string) []string {
	out := make([]string, len(ids))
	for i, id := range ids {
		out[i] = id
		if id == "" {
			out[i] = fmt.Sprintf("pump %d", i+1)
		}
	}
	return out
}

// settingsTable is the valve settings in adjustment order, every branch of
// the plan (risers included), each setting with its unit and check reading.
func settingsTable(p *balance.Plan, u display, title string) report.Table {
	t := report.Table{Title: title, Columns: []string{"#", "Branch", "Valve", "Now", "Set to", "Check: valve Δp (" + u.DiffUnit + ")", "Flow (" + u.FlowUnit + ")"}}
	for _, b := range p.Branches {
		now, set, check := "", "no valve", ""
		if b.Valve != "" {
			now, set = withUnit(b.Current, b.Unit), withUnit(b.New, b.Unit)
			if b.OnIndex && !b.Held {
				set += " (fully open)"
			}
			check = u.diffNum(b.ValveDiff)
		}
		t.Rows = append(t.Rows, []string{fmt.Sprint(len(t.Rows) + 1), b.ID, b.Valve, now, set, check, u.flowNum(b.Target)})
		if b.Bypass != "" {
			// A three-port terminal's bypass valve, set with the
			// three-port valve to full bypass; the check is its drop at
			// the target flow.
			set := withUnit(b.BypassNew, b.BypassUnit)
			switch {
			case b.BypassShort:
				set += " (fully open; the bypass passes less)"
			case finite(b.BypassNew):
				set += " (full bypass = full coil flow)"
			}
			t.Rows = append(t.Rows, []string{fmt.Sprint(len(t.Rows) + 1), b.ID + " bypass", b.Bypass, withUnit(b.BypassNow, b.BypassUnit), set,
				u.diffNum(b.BypassDiff), u.flowNum(b.Target)})
		}
		if c := p.Controller(b.ID); c != nil {
			// Its set point; the check is the span's differential.
			t.Rows = append(t.Rows, []string{fmt.Sprint(len(t.Rows) + 1), b.ID, balance.ControllerValve, u.diff(c.Current), "set point " + u.diff(c.SetPoint),
				"span " + u.diffNum(c.Span), u.flowNum(b.Target)})
		}
	}
	return t
}

// settingsDiffer reports whether two plans set any valve differently.
func settingsDiffer(a, b *balance.Plan) bool {
	if len(a.Branches) != len(b.Branches) {
		return true
	}
	for k := range a.Branches {
		x, y := a.Branches[k].New, b.Branches[k].New
		if finite(x) != finite(y) || (finite(x) && x != y) {
			return true
		}
	}
	return false
}

// withUnit prints a valve setting with its unit and the decimals the unit
// needs: "3.8 turns", "54 %", "12 steps".
func withUnit(v float64, unit string) string {
	if !finite(v) {
		return ""
	}
	switch unit {
	case "%":
		return fmt.Sprintf("%.0f %%", v)
	case "steps":
		if v == math.Trunc(v) {
			return fmt.Sprintf("%.0f steps", v)
		}
		return fmt.Sprintf("%.1f steps", v)
	case "":
		return fmt.Sprintf("%.2f", v)
	}
	return fmt.Sprintf("%.2f %s", v, unit)
}

// proveTable lists the branches to read after setting: the index, those
// whose predicted band leaves the tolerance or that the plan leaves
// outside it, and those the survey did not read or pin down.
func (j *job) proveTable(u display) report.Table {
	t := report.Table{Title: "Prove it", Columns: []string{"Branch", "Why read it", "Expect (" + u.FlowUnit + ")", "95 % band (" + u.FlowUnit + ")", "Tolerance (" + u.FlowUnit + ")"},
		WriteIn: []string{"Read", "Initials"}}
	read := map[string]bool{}
	for _, r := range j.L.Site.Readings {
		if r.What.IsFlow() || r.What == site.BranchDiff || r.What == site.ValveDiff {
			read[r.Where] = true
		}
	}
	undet := map[string]bool{}
	for _, f := range j.Findings {
		if f.Code == diagnose.Undetermined {
			undet[f.Branch] = true
		}
	}
	p := j.Plan
	ranked := j.rankOf()
	type row struct {
		rank  int
		cells []string
	}
	var rows []row
	for _, b := range p.Branches {
		var why []string
		rk, isRanked := ranked[b.ID]
		if isRanked {
			why = append(why, fmt.Sprintf("order %d, by %s: %s", rk.Rank, strings.ReplaceAll(rk.How.String(), "-", " "), rk.Settles))
		}
		if b.ID == p.Index && !isRanked {
			why = append(why, "index circuit: proves the pump is high enough")
		}
		if !b.InTolerance {
			why = append(why, "predicted outside the tolerance")
		} else if p.Banded && !b.BandInTolerance && !isRanked {
			// Say by how much: the band and the tolerance can look equal
			// once rounded to the flow's decimals.
			switch lo := 100 * (1 + p.ToleranceLow); {
			case b.BandLow < lo:
				why = append(why, fmt.Sprintf("band down to %.1f %% of target", b.BandLow))
			default:
				why = append(why, fmt.Sprintf("band up to %.1f %% of target", b.BandHigh))
			}
		}
		if !b.Riser && !read[b.ID] && !j.Plan.DesignOnly {
			why = append(why, "not read in the survey")
		} else if undet[b.ID] {
			why = append(why, "the survey did not pin it down")
		}
		if j.Plan.DesignOnly && !b.Riser {
			why = append(why, "plan from design data")
		}
		if len(why) == 0 {
			continue
		}
		lo, hi := b.BandLow/100*b.Target, b.BandHigh/100*b.Target
		tlo, thi := (1+p.ToleranceLow)*b.Target, (1+p.ToleranceHigh)*b.Target
		r := row{rank: math.MaxInt, cells: []string{b.ID, strings.Join(why, "; "), u.flowNum(b.Predicted),
			u.flowNum(lo) + " to " + u.flowNum(hi), u.flowNum(tlo) + " to " + u.flowNum(thi)}}
		if isRanked {
			r.rank = rk.Rank
		}
		rows = append(rows, r)
	}
	// The ranked readings first, in their order; the rest in walk order.
	slices.SortStableFunc(rows, func(a, b row) int { return cmp.Compare(a.rank, b.rank) })
	for _, r := range rows {
		t.Rows = append(t.Rows, r.cells)
	}
	if pr, ok := ranked["pump"]; ok {
		exp, lo, hi := u.diff(pr.Expect), u.diffNum(pr.Low), u.diff(pr.High)
		if pr.Quantity != site.PumpDiff {
			// A held differential: the total flow is what tells.
			exp, lo, hi = "a total flow of "+u.flow(pr.Expect), u.flowNum(pr.Low), u.flow(pr.High)
		}
		t.Notes = append(t.Notes, fmt.Sprintf("Read the pump's differential and the total flow too (order %d): expect %s, 95 %% band %s to %s; %s.", pr.Rank, exp, lo, hi, pr.Settles))
	}
	if n := j.surveyNote(); n != "" {
		t.Notes = append(t.Notes, n)
	}
	if len(ranked) > 0 {
		t.Notes = append(t.Notes, fmt.Sprintf("The order is by how much each reading lowers the risk of the plan (read-next.csv): the expected number of branches outside the tolerance after trimming, %.2f now, %.2f once every reading in read-next.csv is taken.", j.Reads.Risk, j.Reads.RiskAfter))
	}
	if len(t.Rows) == 0 {
		t.Notes = []string{"No branch needs a reading to prove the plan; read any you like."}
	}
	return t
}

// handover is the record to fill in and sign when the visit ends.
func (j *job) handover(u display) []report.Field {
	s := j.L.Site
	out := []report.Field{
		{Label: "Site", Value: s.Name},
		{Label: "Date of visit", Value: ""},
		{Label: "Work done by (name, company)", Value: ""},
	}
	var kinds []string
	for _, r := range s.Readings {
		if !slices.Contains(kinds, r.Instrument) {
			kinds = append(kinds, r.Instrument)
		}
	}
	if len(kinds) == 0 {
		kinds = []string{"flow or differential meter"}
	}
	for _, k := range kinds {
		out = append(out, report.Field{Label: "Instrument: " + k + " (serial, calibration date)"})
	}
	out = append(out,
		report.Field{Label: "Final readings", Value: "in the “Read after” column of step 4 and in step 5"},
		report.Field{Label: "Memory stops set and locked on every valve", Value: "yes / no"},
		report.Field{Label: "Controls back to automatic", Value: "yes / no"},
	)
	st := j.pumpStep(u)
	out = append(out, report.Field{Label: "Pump changed from → to", Value: st.From + " → " + st.To + "; as left: "})
	var defects []string
	// A set beside the list: on a large site short of head the branches
	// left short number thousands, and a scan of the list per branch was
	// quadratic (12 s at 100,000 branches).
	listed := map[string]bool{}
	for _, fx := range j.fixes(u) {
		defects = append(defects, fx.Where)
		listed[fx.Where] = true
	}
	for _, sh := range j.Plan.Unmet {
		if !listed[sh.ID] {
			defects = append(defects, sh.ID)
			listed[sh.ID] = true
		}
	}
	val := "none found"
	if len(defects) > 0 {
		val = "found: " + joinIDs(defects) + " (step 2); still open after the visit: "
	}
	out = append(out,
		report.Field{Label: "Outstanding defects", Value: val},
		report.Field{Label: "Signed, technician", Value: ""},
		report.Field{Label: "Signed, for the client", Value: ""},
	)
	return out
}

// maxIDs is the most identifiers listed in one sentence.
const maxIDs = 8

func joinIDs(ids []string) string {
	if len(ids) > maxIDs {
		return strings.Join(ids[:maxIDs], ", ") + fmt.Sprintf(" and %d more", len(ids)-maxIDs)
	}
	if len(ids) > 1 {
		return strings.Join(ids[:len(ids)-1], ", ") + " and " + ids[len(ids)-1]
	}
	return strings.Join(ids, "")
}

func pronoun(n int) string {
	if n == 1 {
		return "it"
	}
	return "them"
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// isRemedyWarning recognises the plan's warnings that say what would let a
// short plan meet its targets; the visit shows them with the shortfall.
func isRemedyWarning(w string) bool {
	return strings.Contains(w, "would meet every target") || strings.Contains(w, "restoring it would lower") ||
		strings.Contains(w, "a valve of twice its Kv")
}

// disagreeLines are the check's warnings about readings that disagree with
// each other, each pointing to the finding of the fit that explains it
// where there is one.
func (j *job) disagreeLines(u display) []string {
	byPos := map[site.Pos]*site.Reading{}
	for k := range j.L.Site.Readings {
		r := &j.L.Site.Readings[k]
		byPos[r.Pos] = r
	}
	quote := func(r *site.Reading) string {
		if r.What.IsFlow() {
			return fmt.Sprintf("%s (%s)", u.flow(r.Value), r.Instrument)
		}
		return fmt.Sprintf("%s (%s)", u.diff(r.Value), r.Instrument)
	}
	explained := j.explainedBranches()
	var out []string
	for _, p := range j.L.Problems {
		if p.Severity != site.SeverityWarning || !strings.Contains(p.Msg, "disagrees with") {
			continue
		}
		r := byPos[site.Pos{File: p.File, Line: p.Line}]
		if r == nil {
			continue
		}
		line := fmt.Sprintf("Readings that disagree: %s at %s, %s line %d, read %s", r.What, r.Where, p.File, p.Line, quote(r))
		if m := otherLine.FindStringSubmatch(p.Msg); m != nil {
			n, _ := strconv.Atoi(m[1])
			if o := byPos[site.Pos{File: p.File, Line: n}]; o != nil {
				line += fmt.Sprintf(" where line %d read %s", n, quote(o))
			}
		}
		line += ", more than their uncertainties allow."
		if j.hasMeterFlow(r.Where, r.State) && r.What.IsFlow() {
			line += " A valve-meter flow that disagrees with another flow reading usually means the wrong valve size, model or setting was dialled into the meter."
		}
		if explained[r.Where] != "" {
			line += fmt.Sprintf(" The fit explains it at %s: %s (step 2).", r.Where, explained[r.Where])
		}
		out = append(out, line)
	}
	return out
}

// otherLine finds the line a "disagrees with line N" warning names.
var otherLine = regexp.MustCompile(`disagrees with line (\d+)`)

// explainedBranches maps a branch to the finding of the fit that explains
// odd readings on it: a valve off its table or a suspect reading.
func (j *job) explainedBranches() map[string]string {
	explained := map[string]string{}
	for _, f := range j.Findings {
		switch f.Code {
		case diagnose.ValveMisSet, diagnose.ValveStuck, diagnose.SuspectReading:
			if f.Branch != "" && explained[f.Branch] == "" {
				explained[f.Branch] = f.Message
			}
		}
	}
	return explained
}

// hasMeterFlow reports whether branch where was read by a valve meter in
// state.
func (j *job) hasMeterFlow(where, state string) bool {
	for _, r := range j.L.Site.Readings {
		if r.Where == where && r.State == state && r.What.IsFlow() && r.Instrument == "valve-meter" {
			return true
		}
	}
	return false
}

// controllerAbove returns the riser whose differential controller holds the
// span branch id lies in (the nearest above it), or "".
func (j *job) controllerAbove(id string) string {
	m := j.L.Model
	i, ok := m.Index(id)
	for ok {
		p, has := m.Index(m.Branches[i].Parent)
		if !has {
			return ""
		}
		if m.Branches[p].Controlled() {
			return m.Branches[p].ID
		}
		i = p
	}
	return ""
}
