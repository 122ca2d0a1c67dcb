package cli

import (
	"context"
	"fmt"
	"math"
	"regexp"
	"strings"

	"flowset/internal/balance"
	"flowset/internal/diagnose"
	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
	"flowset/internal/parallel"
	"flowset/internal/plant"
	"flowset/internal/report"
	"flowset/internal/site"
)

// curvePoints is how many points each drawn curve is sampled at: enough
// that a square-law curve shows no kinks at chart size.
const curvePoints = 49

// sysCurves are the report's two system curves: the circuit as found and
// as planned, each at the same differentials.
type sysCurves struct{ before, after []plant.Point }

// systemCurves works out the report's system curves, from zero to 1.4
// times the larger of the two duties (or the pump's shut-off head): the
// two are independent, so each is a stage of its own when there are
// workers to spare.
func (j *job) systemCurves(ctx context.Context) (sysCurves, error) {
	m, s := j.L.Model, j.L.Site
	top := 1.4 * math.Max(j.Before.PumpDiff(), j.After.PumpDiff())
	if m.Pump != nil && s.Boundary.Kind == site.PumpCurve {
		top = math.Max(top, m.Set(1, j.Before.State.Running).AtSpeed(j.Before.State.Speed).ShutOff()*j.Params.PumpHead*m.Fluid.Density*hydraulics.StandardGravity)
	}
	diffs := make([]float64, curvePoints)
	for k := range diffs {
		diffs[k] = top * float64(k) / float64(len(diffs)-1)
	}
	after := start(j.stages, func() ([]plant.Point, error) { return m.SystemCurve(ctx, j.Params, j.Plan.Settings, diffs) })
	before, err := m.SystemCurve(ctx, j.Fitted, j.Before.State.Settings, diffs)
	if err != nil {
		return sysCurves{}, err
	}
	a, err := after.get()
	if err != nil {
		return sysCurves{}, err
	}
	return sysCurves{before, a}, nil
}

// reportInput maps a job onto the report's view model.
func (j *job) reportInput(ctx context.Context, generated string) (report.Input, error) {
	l, m, plan := j.L, j.L.Model, j.Plan
	s := l.Site
	u := j.opts.Units
	toFlow, toDiff := u.toFlow(1), u.toDiff(1)
	xy := func(ps []plant.Point) []report.XY { return xyIn(ps, toFlow, toDiff) }
	fluidText := fluidName(s, m.Fluid)
	in := report.Input{
		Site: s.Name, Fluid: fluidText, Temperature: u.temperature(s.Temperature),
		Generated: generated, Measured: measuredSentence(s),
		FlowUnit: u.FlowUnit, PressureUnit: u.DiffUnit,
		ToleranceLow: 100 * s.ToleranceLow, ToleranceHigh: 100 * s.ToleranceHigh,
	}
	// Summary.
	sum := &in.Summary
	in0, n, in1 := j.toleranceCounts()
	sum.InBefore, sum.OutBefore, sum.InAfter, sum.OutAfter = in0, n-in0, in1, n-in1
	for _, f := range j.Findings {
		if f.Severity == diagnose.Fault {
			where := f.Branch
			if where == "" {
				where = f.Reading
			}
			sum.Faults = append(sum.Faults, fmt.Sprintf("%s: %s", where, f.Message))
		}
	}
	pp := plan.Pump
	sum.SpeedRatio = math.NaN()
	switch s.Boundary.Kind {
	case site.PumpCurve:
		bq, bd := j.pumpBefore()
		sum.SetpointBefore = fmt.Sprintf("pump at %s speed: %s at %s", u.speed(j.Before.State.Speed), u.diff(bd), u.flow(bq))
		sum.SetpointAfter = fmt.Sprintf("pump at %s speed: %s at %s", u.speed(plan.Speed), u.diff(j.After.PumpDiff()), u.flow(j.After.TotalFlow()))
		if j.Before.State.Speed > 0 {
			sum.SpeedRatio = plan.Speed / j.Before.State.Speed
		}
	default:
		sum.SetpointBefore = fmt.Sprintf("%s held at %s", u.diff(j.Before.State.Differential), sensorName(s.Boundary.Sensor))
		sum.SetpointAfter = fmt.Sprintf("%s at %s", u.diff(pp.SetPoint), sensorName(pp.Sensor))
	}
	if j.short() {
		sum.EnergySaving = "none claimed: the plan cannot meet its targets"
	} else if pp.HaveBefore && pp.ElectricalBefore > 0 {
		// A change in percent of a power that rounds to nothing (a
		// boundary of a few Pa) would be a meaningless huge number.
		change := ""
		if pp.ElectricalBefore >= 1 {
			change = fmt.Sprintf(" (%.0f %%)", round0(100*(pp.ElectricalAfter/pp.ElectricalBefore-1)))
		}
		format, scale := "%.2f kW", 1e-3
		if max(pp.ElectricalBefore, pp.ElectricalAfter) < 1000 {
			format, scale = "%.0f W", 1
		}
		word, kwh, cost := "saved", pp.AnnualEnergySaving, pp.AnnualCostSaving
		if round0(kwh) < 0 {
			word, kwh, cost = "more", -kwh, -cost
		}
		sum.EnergySaving = fmt.Sprintf("pump electrical power "+format+" -> "+format+"%s, about %.0f kWh a year %s",
			pp.ElectricalBefore*scale, pp.ElectricalAfter*scale, change, round0(kwh), word)
		if !math.IsNaN(cost) {
			sum.EnergySaving += fmt.Sprintf(" (%.0f %s)", round0(cost), pp.Currency)
		}
	}
	for _, line := range plan.Summary() {
		if j.short() && strings.HasPrefix(line, "Annual energy") {
			continue // no saving is claimed for a plan that cannot meet its targets
		}
		sum.Notes = append(sum.Notes, line)
	}
	if j.Cal == nil {
		sum.Notes = append(sum.Notes, "No readings: everything here comes from the design data alone.")
	} else if !j.Cal.Converged {
		sum.Notes = append(sum.Notes, fmt.Sprintf("The calibration stopped without converging (%s): treat its figures with care.", j.Cal.Status))
	}
	if w := fitWarning(j.Cal); w != "" {
		sum.Notes = append(sum.Notes, "Warning: "+w+".")
	}

	// Branches.
	planBy := map[string]*balance.BranchPlan{}
	for k := range plan.Branches {
		planBy[plan.Branches[k].ID] = &plan.Branches[k]
	}
	// Each branch's flags and first-state readings, gathered once: a scan
	// of every finding and reading per branch was quadratic in the site.
	flagsBy := map[string][]string{}
	for _, f := range j.Findings {
		if f.Reading == "" && f.Code != diagnose.Undetermined {
			flagsBy[f.Branch] = append(flagsBy[f.Branch], f.Code.String())
		}
	}
	drawnF := j.drawn
	if drawnF == nil {
		drawnF = start(nil, func() ([]drawn, error) { return j.branchCurves(), nil })
	}
	drawnBy, _ := drawnF.get()
	for i, b := range m.Branches {
		if b.Riser() {
			continue
		}
		bp := planBy[b.ID]
		rb := report.Branch{ID: b.ID, Design: b.Design * toFlow, Before: j.Before.Flow(i) * toFlow,
			After: math.NaN(), AfterLow: math.NaN(), AfterHigh: math.NaN(),
			RatioFit: math.NaN(), RatioLow: math.NaN(), RatioHigh: math.NaN(),
			NowValue: math.NaN(), PlannedValue: math.NaN()}
		if bp != nil {
			rb.After = bp.Predicted * toFlow
			rb.AfterLow = bp.BandLow / 100 * bp.Target * toFlow
			rb.AfterHigh = bp.BandHigh / 100 * bp.Target * toFlow
			if b.HasValve() {
				rb.ValveUnit = bp.Unit
				rb.NowValue, rb.PlannedValue = bp.Current, bp.New
				// Four significant digits: a rounded handwheel setting such
				// as 1.7 carries float noise (1.7000000000000002).
				rb.SettingNow, rb.SettingPlanned = fmt.Sprintf("%.4g %s", bp.Current, bp.Unit), fmt.Sprintf("%.4g %s", bp.New, bp.Unit)
			}
		}
		if j.Cal != nil && j.Cal.Branches[i].Fitted {
			bf := j.Cal.Branches[i]
			rb.RatioFit, rb.RatioLow, rb.RatioHigh = bf.Ratio, bf.Lo, bf.Hi
		}
		rb.Flags = flagsBy[b.ID]
		d := &drawnBy[i]
		rb.Measured, rb.DesignCurve, rb.FitCurve, rb.FitLow, rb.FitHigh = d.measured, d.design, d.fit, d.fitLow, d.fitHi
		in.Branches = append(in.Branches, rb)
	}

	// Whole circuit.
	opB := plant.Point{Flow: j.Before.TotalFlow(), Diff: j.Before.PumpDiff()}
	opA := plant.Point{Flow: j.After.TotalFlow(), Diff: j.After.PumpDiff()}
	curves := j.curves
	if curves == nil {
		curves = start(nil, func() (sysCurves, error) { return j.systemCurves(ctx) })
	}
	sc, err := curves.get()
	if err != nil {
		return in, err
	}
	sysB, sysA := sc.before, sc.after
	in.Combined.System, in.Combined.SystemAfter = xy(sysB), xy(sysA)
	qmax := math.Max(sysB[len(sysB)-1].Flow, sysA[len(sysA)-1].Flow)
	qs := make([]float64, curvePoints)
	for k := range qs {
		qs[k] = qmax * float64(k) / float64(len(qs)-1)
	}
	in.Combined.PumpBefore = xy(m.PumpCurve(j.Fitted, j.Before.State.Speed, j.Before.State.Running, qs))
	if plan.Speed > 0 {
		in.Combined.PumpAfter = xy(m.PumpCurve(j.Params, plan.Speed, j.Plan.Pump.Running, qs))
	}
	in.Combined.OpBefore = report.XY{X: opB.Flow * toFlow, Y: opB.Diff * toDiff}
	in.Combined.OpAfter = report.XY{X: opA.Flow * toFlow, Y: opA.Diff * toDiff}

	// The visit, then the appendix's tables.
	in.Visit = j.visit(u)
	in.Cautions = cautions(s)
	in.Plan = report.Table{Title: "Full field sheet", Notes: []string{
		"The field sheet with every column (Kv, branch differential, authority) is field-sheet.csv / field-sheet.xlsx beside this report."}}
	in.Plan.Columns, in.Plan.Rows = fieldSheetColumns(j.fieldSheet(u))
	h, rows := j.findingRows()
	in.Diagnosis = report.Table{Title: "Diagnosis", Columns: h, Rows: rows, Notes: []string{
		"Thresholds: restricted when the fitted resistance ratio exceeds 1.5 with 95 % confidence (free below 1/1.5); suspect reading beyond 3 standard uncertainties or removed by the fit's outlier test."}}
	h, rows = j.readingRows()
	in.Readings = report.Table{Title: "Readings and residuals", Columns: h, Rows: rows}
	// A large site's report shows its long tables a page at a time and
	// says where each is whole.
	in.Visit.Settings.File = "field-sheet.xlsx and field-sheet.csv"
	in.Visit.FixesFile = "findings.csv"
	in.Plan.File = "field-sheet.csv and field-sheet.xlsx"
	in.Diagnosis.File = "findings.csv"
	in.Readings.File = "readings.csv"
	in.Files = "field-sheet.csv, field-sheet.xlsx and calibration.csv"
	in.Warnings = reportWarnings(j.L.Problems)
	in.WarningsWhere = "flowset check on the site lists every one with its file and line"
	return in, nil
}

// drawn are one branch's curves in the report: its readings placed on
// them, and the design, fitted and interval-end curves.
type drawn struct {
	measured                   []report.Point
	design, fit, fitLow, fitHi []report.XY
}

// branchCurves draws every terminal branch's curves for the report (by
// model index; nothing for a riser). It reads only the fit and the
// as-found solution, so runJob starts it beside the plan.
func (j *job) branchCurves() []drawn {
	m, s, u := j.L.Model, j.L.Site, j.opts.Units
	toFlow, toDiff := u.toFlow(1), u.toDiff(1)
	xy := func(ps []plant.Point) []report.XY { return xyIn(ps, toFlow, toDiff) }
	readingsAt := map[string][]int{}
	for _, ri := range j.Before.State.Readings {
		w := s.Readings[ri].Where
		readingsAt[w] = append(readingsAt[w], ri)
	}
	// Each branch's curves (design, fitted, the ends of its interval), at
	// the as-found setting, from zero to beyond both 150 % of design and
	// every reading, so the readings sit on the drawn range: independent
	// by branch, so shared out among the workers, each with its own copy
	// of the fitted multipliers to move one branch's to the ends of its
	// interval and back (a copy per branch was quadratic: 39 s at 100,000
	// branches).
	design := m.Design()
	drawnBy := make([]drawn, len(m.Branches))
	workers := parallel.Workers(j.opts.workers)
	bounds := make([]plant.Params, workers)
	parallel.For(workers, len(m.Branches), func(w, i int) {
		b := &m.Branches[i]
		if b.Riser() {
			return
		}
		d := &drawnBy[i]
		set := j.Before.State.Settings[i]
		d.measured = measuredPoints(j, i, readingsAt[b.ID], toFlow, toDiff)
		span := 1.5 * b.Design
		for _, p := range d.measured {
			span = math.Max(span, 1.1*p.X/toFlow)
		}
		flows := make([]float64, curvePoints)
		for k := range flows {
			flows[k] = span * float64(k) / float64(curvePoints-1)
		}
		d.design = xy(m.BranchCurve(design, i, set, flows))
		d.fit = xy(m.BranchCurve(j.Fitted, i, set, flows))
		if j.Cal != nil && j.Cal.Branches[i].Fitted {
			if bounds[w].Resistance == nil {
				bounds[w] = j.Fitted.Clone()
			}
			bw := bounds[w]
			bw.Resistance[i] = j.Cal.Branches[i].Lo
			d.fitLow = xy(m.BranchCurve(bw, i, set, flows))
			bw.Resistance[i] = j.Cal.Branches[i].Hi
			d.fitHi = xy(m.BranchCurve(bw, i, set, flows))
			bw.Resistance[i] = j.Fitted.Resistance[i]
		}
	})
	return drawnBy
}

// reportWarnings passes the site check's warnings to the report, each with
// its kind: the message, with any line it names generalised, so the
// warnings of one kind group together.
func reportWarnings(probs site.Problems) []report.Warning {
	var out []report.Warning
	for _, p := range probs.Warnings() {
		kind := p.Msg
		if kind == "" && p.Err != nil {
			kind = p.Err.Error()
		}
		kind = namedLine.ReplaceAllString(kind, "another line")
		out = append(out, report.Warning{Kind: kind, Text: p.Error()})
	}
	return out
}

// namedLine finds a line a warning's message names ("disagrees with line 12").
var namedLine = regexp.MustCompile(`\bline \d+( \([^)]*\))?`)

// fieldSheetColumns picks the field sheet's columns a page can hold: what
// to set, what to expect and the check reading.
func fieldSheetColumns(h []string, rows [][]string) ([]string, [][]string) {
	want := []string{"Order", "Branch", "Valve", "As-found setting", "New setting", "Setting unit", "Predicted (% of target)",
		"Band low (% of target)", "Band high (% of target)", "In tolerance", "Notes"}
	idx := make([]int, 0, len(want))
	cols := make([]string, 0, len(want))
	for _, w := range want {
		for k, c := range h {
			if c == w {
				idx = append(idx, k)
				cols = append(cols, c)
			}
		}
	}
	out := make([][]string, len(rows))
	for r, row := range rows {
		for _, k := range idx {
			out[r] = append(out[r], row[k])
		}
	}
	return cols, out
}

func xyIn(ps []plant.Point, toFlow, toDiff float64) []report.XY {
	out := make([]report.XY, 0, len(ps))
	for _, p := range ps {
		if math.IsNaN(p.Diff) {
			continue
		}
		out = append(out, report.XY{X: p.Flow * toFlow, Y: p.Diff * toDiff})
	}
	return out
}

// measuredPoints places branch i's readings of the first survey state (at,
// indices into the site's readings, in the state's order) on its curve: a
// flow with a branch differential read in the same state is one point; a
// flow alone is drawn at the fitted differential.
func measuredPoints(j *job, i int, at []int, toFlow, toDiff float64) []report.Point {
	s := j.L.Site
	var flows, diffs []site.Reading
	for _, ri := range at {
		r := s.Readings[ri]
		switch {
		case r.What == site.Flow:
			flows = append(flows, r)
		case r.What == site.BranchDiff:
			diffs = append(diffs, r)
		}
	}
	var out []report.Point
	for _, f := range flows {
		p := report.Point{X: f.Value * toFlow, XErr: 2 * f.Sigma * toFlow, Y: j.Before.BranchDiff(i) * toDiff, YErr: math.NaN(),
			Label: fmt.Sprintf("%s, %s (%s)", f.State, f.Instrument, f.Pos)}
		if len(diffs) > 0 {
			p.Y, p.YErr = diffs[0].Value*toDiff, 2*diffs[0].Sigma*toDiff
		}
		out = append(out, p)
	}
	return out
}

func sensorName(s string) string {
	if s == "" || s == site.AtPump {
		return "the pump"
	}
	return "branch " + s
}

func measuredSentence(s *site.Site) string {
	sum := s.Summary()
	if sum.Readings == 0 {
		return "Nothing was measured: the plan is from design data alone."
	}
	kinds := map[string]int{}
	var order []string
	for _, r := range s.Readings {
		k := r.What.String() + " by " + r.Instrument
		if kinds[k] == 0 {
			order = append(order, k)
		}
		kinds[k]++
	}
	var parts []string
	for _, k := range order {
		parts = append(parts, fmt.Sprintf("%d %s", kinds[k], k))
	}
	return fmt.Sprintf("%s in %s: %s.", countOf(sum.Readings, "reading"), countOf(len(sum.States), "survey state"), strings.Join(parts, ", "))
}

// round0 rounds x to a whole number without a negative zero, which %.0f
// would print as "-0".
func round0(x float64) float64 { return math.Round(x) + 0 }

// cautions are the report's safety cautions: the defaults, and glycol
// handling where the circuit holds glycol.
func cautions(s *site.Site) []string {
	out := report.DefaultCautions()
	switch s.Fluid {
	case "water":
	case site.OtherFluid:
		out = append(out, "The circuit holds a fluid other than water: wear gloves and eye protection at test points, catch what escapes rather than letting it reach a drain, and follow its safety data sheet.")
	default:
		out = append(out, "The circuit holds "+strings.ReplaceAll(s.Fluid, "-", " ")+": wear gloves and eye protection at test points, catch what escapes rather than letting it reach a drain, and follow its safety data sheet.")
	}
	return out
}

// fluidName names the circulating fluid for the report, with its
// properties where they were given as measured rather than taken from the
// tables.
func fluidName(s *site.Site, st fluid.State) string {
	name := s.Fluid
	switch s.Fluid {
	case "water":
	case site.OtherFluid:
		name = "a fluid not in the tables"
	default:
		name = fmt.Sprintf("%s %g %% by volume", strings.ReplaceAll(s.Fluid, "-", " "), s.GlycolPercent)
	}
	if s.Density > 0 || s.Viscosity > 0 || s.KinematicViscosity > 0 {
		name += fmt.Sprintf(" (as measured: %.4g kg/m3, %.4g mPa s)", st.Density, st.Viscosity*1e3)
	}
	return name
}
