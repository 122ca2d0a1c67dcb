package cli

import (
	"context"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"flowset/internal/balance"
	"flowset/internal/calibrate"
	"flowset/internal/diagnose"
	"flowset/internal/network"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// jobOptions are the knobs shared by fit, plan and run.
type jobOptions struct {
	Scale      float64
	Rounding   string
	Share      string // design-first (default) or proportional
	DesignOnly bool   // plan from the design model even when readings exist
	// SurveyMinutes bounds the survey route of a site with no readings
	// (survey-route.csv), minutes; 0 for every ranked reading.
	SurveyMinutes float64
	// SurveyReadings bounds the same route to that many readings (each a
	// place: a branch's flow with its differentials, or the pump's); 0 for
	// no bound.
	SurveyReadings int
	Thresholds     diagnose.Thresholds
	Units          display // display units of every output but JSON
	// workers bounds the stages run side by side after the fit (0:
	// runtime.GOMAXPROCS(0); 1: one after another, as written).
	workers int
	// report is set when the report is wanted: its system curves start
	// as soon as the plan is known.
	report bool
}

// job is the outcome of the main computation on one site.
type job struct {
	L        *loaded
	Cal      *calibrate.Calibration // nil when planning from design
	Fitted   plant.Params           // the calibrated model (design without readings)
	Params   plant.Params           // the model the plan used (see planParams)
	Before   *plant.Solved          // the first survey state (or the base state) on Params
	Findings []diagnose.Finding
	Evidence []diagnose.Branch
	Plan     *balance.Plan
	After    *plant.Solved // the plan's state on Params
	// Remedy holds, by restricted branch ID, the plan once that branch is
	// cleaned, and under "" the plan once all of them are (nil when none).
	Remedy map[string]*remedy
	opts   *jobOptions
	// margin raises the index branch's target (by ID) to cover the
	// uncertainty of what it needs (see indexMargin); nil for none.
	margin map[string]float64
	// flowsRead and flags are flowRead's and flagsOf's answers by branch,
	// worked out once: looked up per branch, a scan of every reading or
	// finding made the tables quadratic in the size of the site.
	flowsRead map[string]float64
	flags     map[string]string
	// Reads ranks the readings to take after setting (or, with surveyPlan,
	// before the visit: a plan from design); nil on a site too large to
	// rank.
	Reads      *balance.ReadPlan
	surveyPlan bool
	// checkAt is, by model index, the setting a branch is read at once
	// after setting for its test points to decide (tpDecides); NaN or nil
	// for none.
	checkAt []float64
	// Trim is the round after setting (trim only) and readLeft the
	// branches read in its as-left state.
	Trim       *balance.TrimPlan
	readLeft   map[string]bool
	trimBeyond float64
	moveUnread bool
	// planPredicted is what the plan the valves were set to predicted of
	// each branch, % of target by ID (trim only).
	planPredicted map[string]float64
	// planOffFit marks by ID the branches that plan was made on another
	// resistance than its fit's (trim only; nil when it does not say).
	planOffFit map[string]bool
	// curves are the report's two system curves (as found, as planned),
	// started once the plan is known, and drawn its branches' curves,
	// started beside the plan; nil when the report is not wanted.
	curves *future[sysCurves]
	drawn  *future[[]drawn]
	// stages runs the job's independent stages (nil: one after another).
	stages *stages
	// unconfirmed are the branches the plan holds at design until a flow
	// read another way confirms their fitted resistance.
	unconfirmed []string
	// testPoints are the verdicts on branches read through their own
	// valve's test points alone at two or more settings, by model index
	// (testPointVerdicts).
	testPoints map[int]tpWeighed
	// hedged are the branches the plan was made on a resistance between
	// two explanations (hedgeTestPoints, hedgeMeters).
	hedged map[string]bool
	// tpLow is, by branch ID, how low its valve's test points would read
	// (as a fraction of the flow) if they, not a restriction, explain a
	// restriction found through them alone (hedgeNotes,
	// hedgeIndexFindings): the fix then starts with a flow read another
	// way.
	tpLow map[string]float64
}

// progress reports long steps on stderr when it is a terminal.
type progress struct {
	w     io.Writer
	on    bool
	start time.Time
}

func newProgress(ios *IO, quiet bool) *progress {
	return &progress{w: ios.Err, on: ios.Terminal && !quiet, start: time.Now()}
}

func (p *progress) step(format string, a ...any) {
	if p.on {
		fmt.Fprintf(p.w, "[%5.1fs] %s\n", time.Since(p.start).Seconds(), fmt.Sprintf(format, a...))
	}
}

// fit returns the calibration's progress callback (nil when progress is
// off): each stage of the fit on a line, and in a stage that counts its
// work (the valve tests) the time it still needs at the pace so far.
func (p *progress) fit() func(stage string, done, total int) {
	if !p.on {
		return nil
	}
	var began time.Time
	return func(stage string, done, total int) {
		switch {
		case done == 0:
			began = time.Now()
			if total > 0 {
				p.step("  fit: %s (%d)", stage, total)
			} else {
				p.step("  fit: %s", stage)
			}
		case total > 0:
			left := time.Since(began).Seconds() / float64(done) * float64(total-done)
			p.step("  fit: %s, %d of %d done, about %.0f s left in them", stage, done, total, math.Ceil(left))
		}
	}
}

// calibrateSite fits the survey, or returns nil when there is nothing to fit.
func calibrateSite(ctx context.Context, l *loaded, pr *progress) (*calibrate.Calibration, error) {
	if len(l.Site.Readings) == 0 {
		return nil, nil
	}
	pr.step("fitting %d readings in %d survey state(s) to %d branches", len(l.Site.Readings), len(l.Model.States), len(l.Model.Branches))
	cal, err := calibrate.Fit(ctx, l.Model, &calibrate.FitOptions{Progress: pr.fit()})
	if err != nil {
		return nil, &dataError{fmt.Errorf("calibration: %w", err)}
	}
	return cal, nil
}

// runJob does check, fit, diagnose and plan. Once the plan is known, the
// report's system curves (opts.report), the ranking of readings and the
// plans for the repairs run as stages of st, side by side; the ranking
// and the repairs are finished when it returns, the curves maybe not.
func runJob(ctx context.Context, l *loaded, opts *jobOptions, pr *progress, st *stages) (*job, error) {
	m := l.Model
	if opts.Units.Name == "" {
		opts.Units = siDisplay()
	}
	j := &job{L: l, Fitted: m.Design(), Params: m.Design(), opts: opts, stages: st}
	if !opts.DesignOnly {
		cal, err := calibrateSite(ctx, l, pr)
		if err != nil {
			return nil, err
		}
		if cal != nil {
			j.Cal, j.Fitted, j.Params = cal, cal.Params, planParams(cal)
		}
	}
	st0 := m.BaseState()
	if len(m.States) > 0 {
		st0 = m.States[0]
	}
	pr.step("solving the as-found state %q", st0.Label)
	before, err := m.Solve(ctx, j.Fitted, st0)
	if err != nil {
		return nil, &dataError{fmt.Errorf("as-found state: %w", err)}
	}
	j.Before = before
	if opts.report {
		// The report's branch curves read only the fit and the state as
		// found: drawn beside the diagnosis and the plan.
		j.drawn = start(st, func() ([]drawn, error) { return j.branchCurves(), nil })
	}
	j.Evidence = evidence(l, j.Cal, before, j.Params)
	for _, e := range j.Evidence {
		if e.Held != nil {
			e.Held.Unit, e.Held.PerSI = opts.Units.FlowUnit, opts.Units.toFlow(1)
		}
	}
	j.Findings = diagnose.Check(j.Evidence, readingEvidence(l, j.Cal), opts.Thresholds)
	if j.Cal == nil {
		// Without a fit every branch is undetermined and there is no
		// posterior to quote; the plan says once that it is from design.
		j.Findings = slices.DeleteFunc(j.Findings, func(f diagnose.Finding) bool { return f.Code == diagnose.Undetermined })
	}

	if m.HasControllers() {
		cs, err := controllerEvidence(ctx, l, j.Cal, j.Fitted, before)
		if err != nil {
			return nil, err
		}
		j.Findings = append(j.Findings, diagnose.Controllers(cs, opts.Thresholds)...)
		slices.SortStableFunc(j.Findings, func(a, b diagnose.Finding) int { return int(b.Severity) - int(a.Severity) })
	}

	tp, err := testPointVerdicts(ctx, j)
	if err != nil {
		return nil, err
	}
	j.testPoints = tp
	applyTestPoints(j)
	unconfirmed := holdUnconfirmed(m, j)
	j.unconfirmed = unconfirmed

	pr.step("planning valve settings for %d branches", len(m.Branches))
	plan, err := balance.Compute(ctx, m, j.Params, j.planOptions())
	if err != nil {
		return nil, &dataError{fmt.Errorf("balancing plan: %w", err)}
	}
	// The hedged branches (on their test points: lowered, never the index;
	// against their flow meter: either way, the index only where the
	// readings decide) and the index margin both come from this plan; one
	// more plan carries both.
	hedges := hedgeTestPoints(j, plan, unconfirmed)
	moved := map[string]bool{}
	for _, h := range hedges {
		moved[h.ID] = true
	}
	hedges = append(hedges, hedgeMeters(j, plan, moved)...)
	id, q, f := indexMargin(j, plan)
	if f > 0 {
		j.margin = map[string]float64{id: q}
	}
	if len(hedges) > 0 || f > 0 {
		p2, err := balance.Compute(ctx, m, j.Params, j.planOptions())
		if f > 0 && (err != nil || len(p2.Unmet) > 0) {
			// The margin is dropped when the pump cannot give it.
			j.margin = nil
			f = 0
			if len(hedges) > 0 {
				p2, err = balance.Compute(ctx, m, j.Params, j.planOptions())
			}
		}
		switch {
		case err != nil:
			for _, h := range hedges {
				j.Params.Resistance[mustIndex(m, h.ID)] = h.Fitted
			}
			hedges = nil
		case len(hedges) > 0 || f > 0:
			plan = p2
		}
		if f > 0 {
			plan.Warnings = append(plan.Warnings, fmt.Sprintf("the index circuit %s is planned %.1f %% above its target: what it needs is known only to within its readings' uncertainty, and a pump set for exactly its target would leave it short half the time; read it after setting (step 5)", id, 100*f))
		}
	}
	plan.DesignOnly = j.Cal == nil
	unread := readByNothing(j.Evidence)
	for _, id := range unconfirmed {
		r := j.Fitted.Resistance[mustIndex(m, id)]
		if unread[id] {
			plan.Warnings = append(plan.Warnings, fmt.Sprintf("%s is fitted at %.2g times its design resistance from its neighbours' readings alone, nothing of its own read: its setting is planned at design until its flow is read; then re-plan with that reading", id, r))
			continue
		}
		plan.Warnings = append(plan.Warnings, fmt.Sprintf("%s reads as %.2g times its design resistance, but only through its own valve's test points: its setting is planned at design until a flow read another way (clamp-on) confirms it; if confirmed, re-plan with that reading", id, r))
	}
	plan.Warnings = append(plan.Warnings, hedgeNotes(j, hedges)...)
	hedgeIndexFindings(j, plan, hedges)
	likelyOff(j)
	j.hedged = map[string]bool{}
	for _, h := range hedges {
		j.hedged[h.ID] = true
	}
	j.Plan = plan
	after, err := m.Solve(ctx, j.Params, plan.State())
	if err != nil {
		return nil, &dataError{fmt.Errorf("planned state: %w", err)}
	}
	j.After = after
	// What follows runs side by side: one progress line names it all.
	var doing []string
	if opts.report {
		j.curves = start(st, func() (sysCurves, error) { return j.systemCurves(ctx) })
		doing = append(doing, "drawing the report's system curves")
	}
	var rank *future[*balance.ReadPlan]
	if len(m.Branches) <= maxRankBranches {
		ro := &balance.ReadOptions{Max: rankListed(len(m.Branches)), Workers: opts.workers}
		if j.Cal != nil {
			doing = append(doing, "ranking the readings to take after setting")
			ro.Uncertainty = j.uncertainty()
			ro.Decides, ro.DecidesWhy, j.checkAt = tpDecides(j, plan, hedges)
		} else {
			// A plan from design: rank the survey to take before setting
			// anything, on the fit's priors, read as found.
			doing = append(doing, "ranking the readings to survey first")
			ro.Uncertainty = priorUncertainty(m)
			ro.ReadAt = &st0
			ro.Max = max(ro.Max, opts.SurveyReadings)
			j.surveyPlan = true
		}
		rank = start(st, func() (*balance.ReadPlan, error) { return balance.RankReadings(ctx, m, j.Params, plan, ro) })
	}
	switch n := j.repairs(); {
	case n == 1:
		doing = append(doing, "planning after the repairs")
	case n > 1:
		doing = append(doing, fmt.Sprintf("planning after each repair and after all (%d plans)", n))
	}
	if len(doing) > 0 {
		pr.step("%s", strings.Join(doing, "; "))
	}
	if err := j.remedies(ctx, st); err != nil {
		return nil, err
	}
	if rank != nil {
		rp, err := rank.get()
		if err != nil {
			return nil, &dataError{fmt.Errorf("ranking readings: %w", err)}
		}
		j.Reads = rp
		if err := j.markChecks(ctx); err != nil {
			return nil, err
		}
	}
	return j, nil
}

// markChecks makes the first valve-meter reading of each branch with a
// check setting (j.checkAt) a check: read at that setting, what it should
// give there on the plan's model, the band scaled alike.
func (j *job) markChecks(ctx context.Context) error {
	for k := range j.Reads.Readings {
		c := &j.Reads.Readings[k]
		if c.Index < 0 || c.Index >= len(j.checkAt) || math.IsNaN(j.checkAt[c.Index]) || c.How != balance.ByValveMeter {
			continue
		}
		i := c.Index
		st := j.Plan.State()
		planned := j.After.Flow(i)
		st.Settings[i] = j.checkAt[i]
		sol, err := j.L.Model.Solve(ctx, j.Params, st)
		if err != nil {
			return &dataError{fmt.Errorf("branch %q read at its check setting: %w", c.Where, err)}
		}
		if f := sol.Flow(i) / planned; f > 0 {
			c.Expect, c.Low, c.High = f*c.Expect, f*c.Low, f*c.High
		}
		c.Check, c.At = true, j.checkAt[i]
		j.checkAt[i] = math.NaN() // the first reading of the branch only
	}
	return nil
}

// maxRankBranches is the largest site whose readings after setting are
// ranked: the ranking's covariance is dense in the uncertain multipliers
// (two per branch), so its cost grows with their square.
const maxRankBranches = 2000

// rankListed is how many readings the ranking lists on a site of n
// branches: a third of them (twice the round the ranking is judged on), at
// least 10 and at most 100.
func rankListed(n int) int { return min(max(10, (n+2)/3), 100) }

// planOptions are the plan's options from the job's.
func (j *job) planOptions() *balance.Options {
	bo := &balance.Options{Scale: j.opts.Scale, Workers: j.opts.workers}
	if j.opts.Rounding == "smart" {
		bo.Rounding = balance.Smart
	}
	if j.opts.Share == "proportional" {
		bo.Share = balance.Proportional
	}
	if j.Cal != nil {
		bo.Uncertainty = j.uncertainty()
	}
	if len(j.margin) > 0 {
		bo.Targets = j.margin
	}
	return bo
}

// maxIndexMargin caps the index margin at 1.5 % of its flow (about 3 % of the
// differential it needs): beyond it the plan would waste more pump head than
// a technician trims on site (common practice, no source).
const maxIndexMargin = 0.015

// indexMargin returns the index branch of plan, its raised target and the
// fraction it is raised by: half the rise of the least differential that
// the one parameter that matters most would cause at the end of its band
// (Plan.LeastHigh at two standard deviations, so about one), in flow by
// the square law, at most maxIndexMargin. A fitted plant's index is the
// branch whose estimated need is largest, so its estimate is as likely low
// as high while a low one leaves it short; a margin of one standard
// deviation keeps it in its band in most cases at a small cost in head.
// Zero without a fit, for a short plan, a negligible spread or an index on a
// pressure-independent valve.
func indexMargin(j *job, plan *balance.Plan) (string, float64, float64) {
	if j.Cal == nil || len(plan.Unmet) > 0 || !(plan.Least > 0) || !(plan.LeastHigh > plan.Least) || j.opts.Scale != 1 && j.opts.Scale != 0 {
		return "", 0, 0
	}
	// Flows go as the square root of the friction they overcome: an open
	// circuit's static lift, in both least differentials, is not part of
	// it.
	friction := plan.Least
	if j.L != nil && j.L.Model != nil {
		friction -= j.L.Model.Lift()
	}
	if !(friction > 0) {
		return "", 0, 0
	}
	f := min(math.Sqrt(1+(plan.LeastHigh-plan.Least)/friction/2)-1, maxIndexMargin)
	if f < 0.002 {
		return "", 0, 0
	}
	if j.L != nil && j.L.Model != nil {
		// A pressure-independent index already has its margin in
		// differential (balance.HoldMargin); more flow would only make it
		// hold more than its target.
		if i, ok := j.L.Model.Index(plan.Index); ok && j.L.Model.Branches[i].PI != nil {
			return "", 0, 0
		}
	}
	for _, b := range plan.Branches {
		if b.ID == plan.Index && b.Target > 0 {
			return b.ID, b.Target * (1 + f), f
		}
	}
	return "", 0, 0
}

// fitWarning says, when the fit is far worse than the readings' stated
// uncertainties allow, that the model and readings disagree, so a plan from
// them is not taken on trust; "" otherwise. The test is the chi-square
// goodness of fit, Q = P(chi2_dof > chi2) below 0.001 calling the model or
// the uncertainties into question (Press et al., Numerical Recipes, 3rd ed.,
// §15.1; threshold from memory).
func fitWarning(c *calibrate.Calibration) string {
	if c == nil || c.DOF <= 0 || !(c.ChiSquare >= 0) {
		return ""
	}
	q := distuv.ChiSquared{K: float64(c.DOF)}.Survival(c.ChiSquare)
	if q >= 1e-3 {
		return ""
	}
	return fmt.Sprintf("the readings disagree with the model far beyond their stated uncertainties (chi-square %.1f on %d degrees of freedom, probability below 0.001): check units, the boundary (set point or pump curve) and the suspect readings before trusting the plan",
		c.ChiSquare, c.DOF)
}

// planParams are the calibrated multipliers the plan works on. A valve found
// set elsewhere than recorded follows its table once its handwheel is read
// correctly, so its apparent Kv offset is dropped: the plan's settings are
// then true handwheel positions (the finding tells the technician to check
// the indicator first).
func planParams(c *calibrate.Calibration) plant.Params {
	p := c.Params.Clone()
	for i, b := range c.Branches {
		if b.Valve.Hypothesis == calibrate.SetElsewhere {
			p.KvScale[i] = 1
		}
	}
	return p
}

// stateParams returns p with each valve the fit found off its table or
// its mark at the Kv the fit found it passing in survey state k (no single
// scale of its table gives what such a valve passes at every setting): the
// fitted model of that state.
func stateParams(j *job, p plant.Params, k int) plant.Params {
	m := j.L.Model
	p = p.Clone()
	for i, b := range j.Cal.Branches {
		mb := &m.Branches[i]
		if !b.KvFitted || mb.Valve == nil || k >= len(b.Valve.Kv) || k >= len(m.States) {
			continue
		}
		kv0, err := mb.Valve.KvAt(m.States[k].Settings[i])
		if kv := b.Valve.Kv[k]; err == nil && kv0 > 0 && kv > 0 && !math.IsInf(kv, 0) {
			p.KvScale[i] = kv / kv0
		}
	}
	return p
}

// holdUnconfirmed plans at design the branches found unable to reach their
// target, far above design, whose only flow evidence is their own valve's
// test points: a valve meter turns one differential into a flow through
// the valve's table, so a meter set up for another valve, a blocked tapping
// or a plug off its spindle reads exactly as a fouled branch does, and
// opening the valve fully on that evidence alone (the index circuit's, with
// the pump raised for it) would flood the branch if the reading is wrong.
// Two independent instruments that agree are rarely both wrong; one is.
// Only a departure of holdRatio() or more is held: beyond the fault prior's
// 99th percentile a restriction is the rarer story and a valve off its
// table the likelier, while below it the fit's restriction stands and the
// branch is planned as fitted, or between the fit and its test points
// reading low (hedgeTestPoints). On the 70 independent test plants the
// branches so found at 2.5-5 times design were fouled 23 times of 29 (a
// seized or loose valve 2, a meter 4), and those at 5 times or more a
// seized or loose valve 15 times of 17 and never fouled; holding from 2.5
// starved the fouled ones (summed rms of the plans 277.1 against 259.4). A
// branch read by nothing of its own (a partial survey) is held at any
// multiple: its restriction is only the fit's account of its neighbours'
// readings. A branch that can still reach its target is planned as fitted:
// opening its valve part way costs little if the reading is wrong. It
// returns the IDs held and notes the hold on their findings.
func holdUnconfirmed(m *plant.Model, j *job) []string {
	if j.Cal == nil {
		return nil
	}
	indep, unread, ratio := j.flowReadAnotherWay(), readByNothing(j.Evidence), holdRatio()
	var held []string
	isHeld := map[string]bool{} // held as a set: findings x held was quadratic
	for k := range j.Findings {
		f := &j.Findings[k]
		if indep[f.Branch] {
			continue
		}
		i, ok := m.Index(f.Branch)
		if !ok || isHeld[f.Branch] {
			continue
		}
		if v, ok := j.testPoints[i]; ok && (tpOff(v) || tpRight(v) && f.Code == diagnose.CannotReachDesign) {
			// Read at several settings, its test points are decided: off,
			// or right about a branch short of flow (the hold's one doubt).
			// A branch passing far more than designed stays held with its
			// test points right: its valve off its table is the other
			// doubt, which they do not settle (an independent 90-branch
			// plant: a clean branch fitted at 0.73 times design, its test
			// points confirmed, planned on that fit at 89 %).
			continue
		}
		switch {
		case f.Code == diagnose.CannotReachDesign && (j.Params.Resistance[i] >= ratio || unread[f.Branch]):
			// Or read by nothing of its own: its restriction is the fit's
			// account of its neighbours' readings, and opening it fully
			// with the pump raised for it rests on that alone (a clean
			// branch of an independent 80-branch plant so fitted at 4.4
			// times design from a 30 % survey and planned as fitted got
			// 161 % of its target, its neighbours short).
		case f.Code == diagnose.ValveMisSet && j.Cal.Branches[i].Valve.Hypothesis != calibrate.SetElsewhere && j.Params.Resistance[i] < 1:
			// Found passing far more than designed behind a valve the
			// readings cannot separate: a plug off its spindle, a
			// handwheel off its mark or a meter reading low. Under the
			// first two the valve's table no longer applies and no setting
			// computed from it is right; under the third the design is.
		default:
			continue
		}
		j.Params.Resistance[i] = 1
		held = append(held, f.Branch)
		isHeld[f.Branch] = true
	}
	for k := range j.Findings {
		f := &j.Findings[k]
		switch {
		case (f.Code == diagnose.CannotReachDesign || f.Code == diagnose.Restricted) && isHeld[f.Branch] && unread[f.Branch]:
			f.Action = "read its flow before anything else (its valve's test points or a clamp-on meter): nothing of its own was read, and only the fit's account of its neighbours' readings makes it short; the plan holds its design setting until then"
		case (f.Code == diagnose.CannotReachDesign || f.Code == diagnose.Restricted) && isHeld[f.Branch]:
			f.Action = "read its flow with a clamp-on meter to confirm before anything else: only its valve's test points say it is short, and a meter set up for another valve reads the same way; the plan holds its design setting until then"
		}
	}
	return held
}

// readByNothing is the set of branches nothing of their own measured.
func readByNothing(ev []diagnose.Branch) map[string]bool {
	out := map[string]bool{}
	for _, e := range ev {
		if len(e.Measured) == 0 {
			out[e.ID] = true
		}
	}
	return out
}

// holdRatio is the multiple of design beyond which holdUnconfirmed holds
// a branch: the 99th percentile of the fit's prior on a faulted branch's
// resistance (log-normal about design, sd calibrate.DefaultPriorResistance
// = ln 2), about 5.0.
func holdRatio() float64 {
	return math.Exp(distuv.UnitNormal.Quantile(0.99) * calibrate.DefaultPriorResistance)
}

func mustIndex(m *plant.Model, id string) int {
	i, _ := m.Index(id)
	return i
}

// priorUncertainty is the spread of the multipliers before any reading: the
// fit's priors (calibrate's defaults), a branch's resistance as the sd of
// its clean-or-faulty mixture.
func priorUncertainty(m *plant.Model) *balance.Uncertainty {
	f := calibrate.DefaultFaultShare
	r := math.Sqrt((1-f)*calibrate.DefaultPriorClean*calibrate.DefaultPriorClean + f*calibrate.DefaultPriorResistance*calibrate.DefaultPriorResistance)
	u := &balance.Uncertainty{LnResistance: make([]float64, len(m.Branches)), LnKvScale: make([]float64, len(m.Branches)),
		LnHeader: calibrate.DefaultPriorHeader, LnPumpHead: calibrate.DefaultPriorPump}
	for i, b := range m.Branches {
		if m.FixedElement(i, 1) != nil {
			u.LnResistance[i] = r
		}
		if b.Valve != nil {
			u.LnKvScale[i] = calibrate.DefaultPriorKv
		}
	}
	return u
}

// uncertainty carries the calibration's spread into the plan.
func uncertainty(c *calibrate.Calibration) *balance.Uncertainty {
	u := &balance.Uncertainty{LnResistance: make([]float64, len(c.Branches)), LnKvScale: make([]float64, len(c.Branches))}
	for i, b := range c.Branches {
		if b.Fitted {
			u.LnResistance[i] = b.SD
		}
		if b.KvFitted {
			u.LnKvScale[i] = b.KvSD
		}
	}
	if c.Header.Fitted {
		u.LnHeader = c.Header.SD
	}
	if c.Pump.Fitted {
		u.LnPumpHead = c.Pump.SD
	}
	return u
}

// uncertainty is the spread of j's multipliers as the plan, the ranking
// and the trim take them: the fit's, but for a branch whose test points
// the readings at several settings find reading off, placed by that
// weighing with its valve on its table. The fit held those readings right
// and put the valve off its table or its mark, which can spread its Kv
// over decades (an independent 200-branch plant: test points 25 % high, a
// valve fitted seized with sd 2.5 in ln Kv, its plan's band 1-8,000 %).
func (j *job) uncertainty() *balance.Uncertainty {
	if j.Cal == nil {
		return nil
	}
	u := uncertainty(j.Cal)
	for i, v := range j.testPoints {
		if tpOff(v) {
			u.LnResistance[i], u.LnKvScale[i] = max(v.RatioSD, 0.01), calibrate.DefaultPriorKv
		}
	}
	return u
}

// evidence gathers what diagnose needs about each terminal branch.
func evidence(l *loaded, c *calibrate.Calibration, before *plant.Solved, open plant.Params) []diagnose.Branch {
	m := l.Model
	sum := l.Site.Summary()
	measured := map[string][]string{}
	hasFlow, testPoints := map[string]bool{}, map[string]bool{}
	for _, b := range sum.Measured {
		for _, by := range b.By {
			measured[b.ID] = append(measured[b.ID], by.String())
		}
	}
	for _, r := range l.Site.Readings {
		switch {
		case r.What == site.Flow && r.Instrument != "valve-meter":
			hasFlow[r.Where] = true
		case r.What == site.Flow || r.What == site.ValveDiff:
			testPoints[r.Where] = true
		}
	}
	var out []diagnose.Branch
	for i, b := range m.Branches {
		if b.Riser() {
			continue
		}
		e := diagnose.Branch{ID: b.ID, Ratio: 1, LogSD: math.Inf(1), Target: b.Target, OpenFlow: openFlow(m, before, i, open),
			Measured: measured[b.ID], HasFlow: hasFlow[b.ID], HasValve: b.Valve != nil, TestPoints: testPoints[b.ID], FaultProb: math.NaN(), DataLn: math.NaN(), DataSD: math.NaN(), DesignDrop: math.NaN()}
		if f := m.FixedElement(i, 1); f != nil {
			e.DesignDrop, _ = f.Drop(b.Design, m.Fluid)
		}
		if c != nil {
			bf := c.Branches[i]
			if bf.Fitted {
				e.Ratio, e.LogSD, e.Determined = bf.Ratio, bf.SD, bf.Determined
				e.FaultProb, e.DataLn, e.DataSD = bf.FaultProb, bf.DataLn, bf.DataSD
			}
			if bf.Held {
				h := &diagnose.Held{Regulates: bf.Regulates, Scale: bf.KvScale, Lo: bf.KvLo, Hi: bf.KvHi, Fitted: bf.KvFitted, Determined: bf.KvDetermined}
				for _, st := range bf.HeldStates {
					if st.Starved {
						h.Starved = append(h.Starved, diagnose.HeldState{State: st.State, ValveDiff: st.ValveDiff, HoldDiff: st.HoldDiff, Flow: st.Flow, SetFlow: st.SetFlow})
					}
				}
				e.Held = h
			}
			if v := valveEvidence(c, i); v != nil {
				if b.ValveModel != nil {
					v.Unit = b.ValveModel.Unit
				}
				e.Valve = v
			}
		} else {
			e.Determined = false
			e.LogSD = 0
		}
		out = append(out, e)
	}
	return out
}

func valveEvidence(c *calibrate.Calibration, i int) *diagnose.Valve {
	v := c.Branches[i].Valve
	var h string
	switch v.Hypothesis {
	case calibrate.HoldsOneKv:
		h = "holds one Kv"
	case calibrate.SetElsewhere:
		h = "set elsewhere"
	case calibrate.FollowsTable:
		h = "follows its table"
	default:
		return nil
	}
	out := &diagnose.Valve{Hypothesis: h, DeltaChi2: v.DeltaChiSquare, Recorded: math.NaN(), Implied: math.NaN(), Assumed: v.Assumed, TableRatio: v.TableRatio}
	if len(v.Recorded) > 0 {
		out.Recorded = v.Recorded[0]
	}
	if len(v.Implied) > 0 {
		out.Implied = v.Implied[0]
	}
	return out
}

// openFlow is the flow branch i would pass, with multipliers p, with its
// valve fully open at the differential it sees now. Opening one valve barely changes the header
// pressures of a many-branch circuit, so the differential is held; for a
// small circuit this overstates the open-valve flow slightly.
func openFlow(m *plant.Model, s *plant.Solved, i int, p plant.Params) float64 {
	b := &m.Branches[i]
	if !b.HasValve() {
		return math.NaN()
	}
	_, hi := b.Range()
	c := network.ElementCurve(m.Fluid, m.Elements(i, p, hi)...)
	q, err := network.Invert(c, s.BranchDiff(i))
	if err != nil {
		return math.NaN()
	}
	return q
}

// readingEvidence lists each reading's fit for diagnose.
func readingEvidence(l *loaded, c *calibrate.Calibration) []diagnose.Reading {
	if c == nil {
		return nil
	}
	out := make([]diagnose.Reading, 0, len(c.Readings))
	for _, rf := range c.Readings {
		if rf.Boundary {
			continue
		}
		r := l.Site.Readings[rf.Index]
		out = append(out, diagnose.Reading{Label: rf.Pos.String(), Where: r.Where, What: r.What.String(), Normalised: rf.Normalised, Outlier: rf.Outlier, Why: rf.Why})
	}
	return out
}

// controllerEvidence gathers the evidence about each differential
// controller from the fitted model solved in every survey state (first the
// one already solved): where it lies wide open, and the readings across its
// span where it throttles.
func controllerEvidence(ctx context.Context, l *loaded, cal *calibrate.Calibration, p plant.Params, first *plant.Solved) ([]diagnose.Controller, error) {
	m := l.Model
	sols := []*plant.Solved{first}
	for _, st := range m.States {
		if st.Label == first.State.Label {
			continue
		}
		sol, err := m.Solve(ctx, p, st)
		if err != nil {
			return nil, &dataError{fmt.Errorf("state %q: %w", st.Label, err)}
		}
		sols = append(sols, sol)
	}
	var out []diagnose.Controller
	for i := range m.Branches {
		b := &m.Branches[i]
		if !b.Controlled() {
			continue
		}
		c := diagnose.Controller{ID: b.ID, SetPoint: b.Controller.SetPoint}
		if cal != nil {
			for _, cf := range cal.Controllers {
				if cf.Index == i {
					c.Held, c.Lo, c.Hi = cf.Held, cf.Lo, cf.Hi
				}
			}
		}
		held := map[string]bool{}
		for _, sol := range sols {
			span, _ := sol.ControlledDiff(i)
			sp := m.HeldSetPoint(sol.Params, sol.State.SetPoints, i)
			held[sol.State.Label] = span >= sp*(1-1e-3)
			if !held[sol.State.Label] && !c.Open {
				c.Open, c.State, c.Span = true, sol.State.Label, span
			}
		}
		for _, r := range l.Site.Readings {
			if r.What == site.ControlledDiff && r.Where == b.ID && held[r.State] {
				c.Readings = append(c.Readings, diagnose.SpanReading{Label: r.Pos.String(), State: r.State, Value: r.Value, Sigma: r.Sigma})
			}
		}
		out = append(out, c)
	}
	return out, nil
}

// flowReadAnotherWay marks, by branch ID, the branches whose flow was read
// by something other than their own valve's test points (a clamp-on or a
// flow meter): the evidence a restriction found through the test points
// alone lacks.
func (j *job) flowReadAnotherWay() map[string]bool {
	out := map[string]bool{}
	for _, e := range j.Evidence {
		out[e.ID] = e.HasFlow
	}
	return out
}
