package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"flowset/internal/calibrate"
	"flowset/internal/report"
	"flowset/internal/site"
	"flowset/surveys"
)

// runOptions configure fit, plan, run and demo.
type runOptions struct {
	Site  string
	Out   string
	Force bool
	Quiet bool
	Units string // display units: si or us
	// unitsSet records that --units was given, overriding the site's key.
	unitsSet bool
	JSON     bool // print the result as JSON on stdout instead of text
	// builtin is set for demo: the site is built in, not a path.
	builtin bool
	job     jobOptions
	// what to write
	writeFit, writePlan, writeReport bool
	// trim is set for trim: the round after setting.
	trim *trimOptions
}

func addJobFlags(cmd *cobra.Command, o *runOptions, plan bool) {
	cmd.Flags().StringVar(&o.Out, "out", "", "output folder (must not exist unless --force)")
	cmd.Flags().BoolVar(&o.Force, "force", false, "replace an output folder flowset wrote earlier, if nothing in it was changed or added")
	cmd.Flags().BoolVar(&o.Quiet, "quiet", false, "print nothing but errors and warnings (no progress, no summary)")
	cmd.Flags().StringVar(&o.Units, "units", "si", "display units: si (l/s, kPa), si-m3h (m3/h, kPa) or us (gpm, psi, Cv, °F); JSON stays SI")
	cmd.Flags().BoolVar(&o.JSON, "json", false, "print the result as JSON on stdout (SI units, named in every key)")
	cmd.Flags().Float64Var(&o.job.Thresholds.Restricted, "restricted-ratio", 1.5, "resistance ratio above which a branch is flagged restricted (1/ratio for free)")
	cmd.Flags().Float64Var(&o.job.Thresholds.Confidence, "confidence", 0.95, "probability a ratio must have of passing its threshold to be flagged")
	cmd.Flags().Float64Var(&o.job.Thresholds.SuspectZ, "suspect-z", 3, "normalised residual above which a reading is suspect")
	o.job.Scale = 1 // fit has no --scale; its plan-free job checks the same
	if plan {
		cmd.Flags().Float64Var(&o.job.Scale, "scale", 1, "balance to this fraction of the design (or target) flows, e.g. 0.9")
		cmd.Flags().StringVar(&o.job.Rounding, "rounding", "smart", "valve setting rounding: smart (keep branches in tolerance) or nearest")
		cmd.Flags().StringVar(&o.job.Share, "share", "design-first", "when the pump cannot serve every target: design-first (branches that can reach target get it, the rest open fully) or proportional (all short by the same fraction)")
		cmd.Flags().BoolVar(&o.job.DesignOnly, "design-only", false, "plan from the design data, ignoring the readings")
		cmd.Flags().Float64Var(&o.job.SurveyMinutes, "survey-minutes", 0, "for a site with no readings yet: the time the survey may take, in minutes; survey-route.csv walks the readings worth most within it in route order (0: every ranked reading)")
		cmd.Flags().IntVar(&o.job.SurveyReadings, "survey-readings", 0, "for a site with no readings yet: the most readings the survey may take (each a place: a branch, or the pump); survey-route.csv walks the ones worth most in route order (0: no bound besides --survey-minutes)")
	}
}

// maxSurveyReadings bounds --survey-readings: one per branch the ranking
// takes and the pump.
const maxSurveyReadings = maxRankBranches + 1

func (o *runOptions) validate(needOut bool) error {
	if needOut && o.Out == "" {
		return usagef("--out is required: name a folder for the outputs")
	}
	u, err := displayUnits(o.Units)
	if err != nil {
		return usagef("--%v", err)
	}
	o.job.Units = u
	if o.job.Rounding != "" && o.job.Rounding != "smart" && o.job.Rounding != "nearest" {
		return usagef("--rounding %q: want smart or nearest", o.job.Rounding)
	}
	if o.job.Share != "" && o.job.Share != "design-first" && o.job.Share != "proportional" {
		return usagef("--share %q: want design-first or proportional", o.job.Share)
	}
	if !(o.job.SurveyMinutes >= 0 && o.job.SurveyMinutes <= 1e5) {
		return usagef("--survey-minutes %g: want a time in minutes, 0 for every ranked reading", o.job.SurveyMinutes)
	}
	if !(o.job.SurveyReadings >= 0 && o.job.SurveyReadings <= maxSurveyReadings) {
		return usagef("--survey-readings %d: want a number of readings from 1 to %d, 0 for no bound", o.job.SurveyReadings, maxSurveyReadings)
	}
	// Written so that NaN fails every test: a comparison with NaN is false.
	if !(o.job.Scale >= 0.2 && o.job.Scale <= 2) {
		return usagef("--scale %g: want a fraction of design between 0.2 and 2", o.job.Scale)
	}
	if r := o.job.Thresholds.Restricted; !(r > 1 && r <= 1e6) {
		return usagef("--restricted-ratio %g: want a ratio above 1 (and at most 1e6)", r)
	}
	if c := o.job.Thresholds.Confidence; !(c > 0.5 && c < 1) {
		return usagef("--confidence %g: want a probability between 0.5 and 1", c)
	}
	if z := o.job.Thresholds.SuspectZ; !(z > 0 && z <= 1e6) {
		return usagef("--suspect-z %g: want a positive number (at most 1e6)", z)
	}
	return nil
}

// newSiteJobCmd builds fit, plan and run: one site argument, the job flags,
// and what each writes.
func newSiteJobCmd(ios *IO, o *runOptions, use, short, long string, needOut bool) *cobra.Command {
	cmd := &cobra.Command{
		Use:   use,
		Short: short,
		Long:  long,
		Args:  exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			o.Site = args[0]
			o.unitsSet = cmd.Flags().Changed("units")
			if err := o.validate(needOut); err != nil {
				return err
			}
			return runMain(cmd.Context(), ios, o, loadSite)
		},
	}
	addJobFlags(cmd, o, o.writePlan)
	return cmd
}

func newFitCmd(ios *IO) *cobra.Command {
	return newSiteJobCmd(ios, &runOptions{writeFit: true}, "fit SITE",
		"Fit the survey to the plant and say what deviates from design",
		`Fit estimates each branch's actual hydraulic resistance (and, where the
readings allow, valve Kv offsets, the header and the pump) from every survey
state together, prints the fitted ratios with 95 % intervals and the findings,
and with --out writes the calibrated model as CSV and JSON.`, false)
}

func newPlanCmd(ios *IO) *cobra.Command {
	return newSiteJobCmd(ios, &runOptions{writePlan: true}, "plan SITE",
		"Plan every balancing valve setting and the pump set-point at once",
		`Plan calibrates the model on the survey (or uses the design data when there
are no readings, and says so), finds the index circuit, and computes one set of
valve settings that gives every branch its target flow at the lowest pump head,
with the pump speed or differential set-point then needed and the energy saved.
With --out it writes the field sheet (CSV and workbook, in walking order) and
JSON.`, false)
}

func newRunCmd(ios *IO) *cobra.Command {
	return newSiteJobCmd(ios, &runOptions{writeFit: true, writePlan: true, writeReport: true}, "run SITE --out DIR",
		"Do the whole job: check, fit, diagnose, plan, report",
		`Run checks the site, fits the survey, diagnoses deviations, plans the valve
settings and pump set-point, and writes into DIR the HTML report (one file
that works offline), the field sheets (CSV and workbook), the calibrated model
and the findings. DIR must not exist; --force replaces only an output of an
earlier run whose files are unchanged (see 'flowset help exit'). It is written
whole or not at all.

The console, the report's first pages and the field sheet follow the order
of work on site: before you start, fix first, pump, valve settings, prove it
(and, on paper, the hand-over). A plan that cannot meet its targets says so
first, claims no saving, writes its outputs all the same and exits with
status 5 (see 'flowset help exit').

Examples:
  flowset run site --out job
  flowset run site.xlsx --out job --units us
  flowset run site --json --out job > result.json`, true)
}

func newDemoCmd(ios *IO) *cobra.Command {
	o := &runOptions{writeFit: true, writePlan: true, writeReport: true}
	var name string
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Run the whole job on the built-in demo site",
		Long: `Demo runs the whole job (see 'flowset help run') on an invented site built
into flowset, writes the outputs to a fresh folder (./flowset-demo, or the
next free ./flowset-demo-N; or --out) and prints where the report is.
'flowset demo --site plantroom' runs the second example site.`,
		Args: exactArgs(0),
		RunE: func(cmd *cobra.Command, args []string) error {
			found := false
			for _, n := range surveys.Names() {
				found = found || n == name
			}
			if !found {
				return usagef("--site %q: the built-in sites are %q", name, surveys.Names())
			}
			if o.Out == "" {
				o.Out = freshDir("flowset-demo")
			}
			o.Site, o.builtin = "(built-in) "+name, true
			o.unitsSet = cmd.Flags().Changed("units")
			if err := o.validate(true); err != nil {
				return err
			}
			return runMain(cmd.Context(), ios, o, func(ctx context.Context, _ string, w io.Writer) (*loaded, error) { return loadEmbedded(ctx, name, w) })
		},
	}
	addJobFlags(cmd, o, true)
	cmd.Flags().StringVar(&name, "site", "demo", "built-in site to run")
	return cmd
}

// freshDir returns base, or base-N for the first N that does not exist.
func freshDir(base string) string {
	if _, err := os.Lstat(base); err != nil {
		return base
	}
	for n := 2; ; n++ {
		d := fmt.Sprintf("%s-%d", base, n)
		if _, err := os.Lstat(d); err != nil {
			return d
		}
	}
}

// loader reads a site, listing its problems on w.
type loader func(ctx context.Context, path string, w io.Writer) (*loaded, error)

// loadEmbedded reads a built-in site.
func loadEmbedded(ctx context.Context, name string, w io.Writer) (*loaded, error) {
	s, probs, err := site.ReadDir(surveys.FS, name)
	if err != nil {
		return nil, &dataError{err}
	}
	return finishLoad(ctx, s, probs, "built-in site "+name, w)
}

// runMain is fit, plan, run and demo: compute, print, write.
func runMain(ctx context.Context, ios *IO, o *runOptions, load loader) (err error) {
	pr := newProgress(ios, o.Quiet)
	var claim *outClaim
	if o.Out != "" {
		// Claimed before the work, so a second run to the same folder
		// stops at once rather than after computing.
		var inputs []string
		if !o.builtin {
			inputs = []string{o.Site}
		}
		claim, err = claimOut("--out ", o.Out, o.Force, false, inputs)
		if err != nil {
			return err
		}
		// err is the named result: the claim is released, and the parent
		// folders it made removed, unless the folder was written.
		defer func() {
			var short *shortError
			claim.finish(err == nil || errors.As(err, &short)) // a short plan's outputs are written
		}()
	}
	pr.step("reading %s", shown(o.Site))
	l, err := load(ctx, o.Site, ios.Err)
	if err != nil {
		return err
	}
	if !o.unitsSet && l.Site.Units != "" {
		// The site's own "units" key, unless --units was given.
		u, err := displayUnits(l.Site.Units)
		if err != nil {
			return &dataError{err}
		}
		o.job.Units = u
	}
	left := -1
	var set *setPlanRead
	if o.trim != nil {
		if left, set, err = leftState(l, o.trim); err != nil {
			return err
		}
	}
	// The stages after the fit run side by side; whatever way the command
	// ends, none outlives it (cancelled first, then waited for).
	o.job.workers = ios.workers
	st := newStages(o.job.workers)
	defer st.wait()
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	o.job.report = o.writeReport && o.Out != ""
	j, err := runJob(ctx, l, &o.job, pr, st)
	if err != nil {
		printProblems(ios.Err, l.Problems)
		return err
	}
	if left >= 0 {
		j.trimBeyond, j.moveUnread, j.planPredicted, j.planOffFit = o.trim.Beyond, o.trim.MoveUnread, set.Predicted, set.OffFit
		pr.step("trimming after setting (state %q)", l.Model.States[left].Label)
		if err := j.trim(ctx, left); err != nil {
			return err
		}
	}
	printWarnings(ios.Err, l.Problems, j)
	generated := ios.now().UTC().Format("2006-01-02 15:04 MST")
	switch {
	case o.JSON && j.Trim != nil:
		if err := writeJSON(ios.Out, j.trimOut(generated)); err != nil {
			return sysErr(err)
		}
	case o.JSON:
		if err := printJSON(ios.Out, j, o, generated); err != nil {
			return err
		}
	case !o.Quiet:
		// The order of work first; the fit behind it after, as in the
		// report's appendix.
		// With the report and sheets written, a large site's tables go to
		// them and the console keeps what needs action.
		sheets := o.Out != "" && o.writeReport && o.writePlan
		if j.Trim != nil {
			printTrim(ios.Out, j)
		}
		if o.writePlan {
			printVisit(ios.Out, j, sheets)
		}
		if o.writeFit && o.writePlan {
			fmt.Fprintln(ios.Out, "\nThe model behind the plan")
		}
		if o.writeFit {
			printFit(ios.Out, j, sheets)
		}
	}
	if o.Out == "" {
		return j.shortErr(o)
	}
	// Every output file is written as a stage of its own, side by side
	// with the others and the report's model (its system curves may
	// still be running), into the folder being assembled; one after
	// another (one worker), in the order listed.
	j.settle()
	var inF *future[report.Input]
	switch {
	case j.Trim != nil:
		inF = start(st, func() (report.Input, error) { return j.trimReportInput(ctx, generated) })
	case o.writeReport:
		inF = start(st, func() (report.Input, error) { return j.reportInput(ctx, generated) })
	}
	type file struct {
		name  string
		write func(io.Writer) error
	}
	var files []file
	put := func(name string, write func(io.Writer) error) { files = append(files, file{name, write}) }
	if o.writeFit || o.writeReport || j.Trim != nil {
		put("calibration.json", func(w io.Writer) error { return writeJSON(w, j.calibrationOut(generated)) })
		put("calibration.csv", func(w io.Writer) error { h, rows := j.fitRows(); return writeCSV(w, h, rows) })
		put("findings.csv", func(w io.Writer) error { h, rows := j.findingRows(); return writeCSV(w, h, rows) })
		put("readings.csv", func(w io.Writer) error { h, rows := j.readingRows(); return writeCSV(w, h, rows) })
	}
	if o.writePlan || o.writeReport {
		put("field-sheet.csv", func(w io.Writer) error { h, rows := j.fieldSheet(o.job.Units); return writeCSV(w, h, rows) })
		put("field-sheet.xlsx", func(w io.Writer) error {
			h, rows := j.fieldSheet(o.job.Units)
			return writeWorkbook(w, h, rows, j.fieldSheetAbout(o.job.Units, generated))
		})
		put("plan.json", func(w io.Writer) error { return writeJSON(w, j.planOut(generated)) })
		if j.Reads != nil {
			put("read-next.csv", func(w io.Writer) error { h, rows := j.readNextRows(o.job.Units); return writeCSV(w, h, rows) })
			put("read-next.json", func(w io.Writer) error { return writeJSON(w, j.readNextOut()) })
			if j.surveyPlan {
				put("survey-route.csv", func(w io.Writer) error { h, rows := j.surveyRouteRows(o.job.Units); return writeCSV(w, h, rows) })
			}
		}
	}
	if j.Trim != nil {
		put("trim.csv", func(w io.Writer) error {
			t := j.trimTable(o.job.Units)
			return writeCSV(w, append(t.Columns, t.WriteIn...), padRows(t.Rows, len(t.WriteIn)))
		})
		put("trim.json", func(w io.Writer) error { return writeJSON(w, j.trimOut(generated)) })
	}
	var inErr error // the report's model failing: a data error, not the disk's
	if inF != nil {
		put("report.html", func(w io.Writer) error {
			in, err := inF.get()
			if err != nil {
				inErr = err
				return err
			}
			return report.Write(w, in)
		})
		pr.step("drawing the report; writing the field sheets and the model into %s alongside", shown(o.Out))
	} else {
		pr.step("writing %s", shown(o.Out))
	}
	err = claim.writeDir(ctx, func(create func(string) (io.WriteCloser, error)) error {
		done := make([]*future[struct{}], len(files))
		for k, f := range files {
			done[k] = start(st, func() (struct{}, error) {
				w, err := create(f.name)
				if err != nil {
					return struct{}{}, err
				}
				if err := f.write(w); err != nil {
					w.Close()
					return struct{}{}, fmt.Errorf("%s: %w", f.name, err)
				}
				return struct{}{}, w.Close()
			})
		}
		// Every stage ends before the folder is finished or thrown away;
		// the first error in the order listed is the one reported.
		var first error
		for _, d := range done {
			if _, err := d.get(); err != nil && first == nil {
				first = err
			}
		}
		return first
	})
	if inErr != nil {
		return &dataError{fmt.Errorf("report: %w", inErr)}
	}
	if err != nil {
		return err
	}
	if !o.Quiet && !o.JSON {
		if o.writeReport || j.Trim != nil {
			fmt.Fprintf(ios.Out, "\nreport: %s\n", shown(filepath.Join(o.Out, "report.html")))
		}
		fmt.Fprintf(ios.Out, "outputs written to %s\n", shown(o.Out))
	}
	return j.shortErr(o)
}

// shortErr is a *shortError when the job planned and its plan cannot meet
// its targets, else nil.
func (j *job) shortErr(o *runOptions) error {
	if (o.writePlan || o.writeReport) && j.short() {
		return &shortError{len(j.Plan.Unmet)}
	}
	return nil
}

// fitRowsShown picks the rows of the fit's table a large site's console
// shows: the branches with a finding, at most max of them, those whose fitted
// resistance is furthest from design (in ln ratio; unfitted ones last, then
// in the model's order); also how many branches have a finding.
func (j *job) fitRowsShown(max int) (map[int]bool, int) {
	type row struct {
		i   int
		off float64
	}
	var rows []row
	for i, b := range j.L.Model.Branches {
		if j.flagsOf(b.ID) == "" {
			continue
		}
		off := -1.0
		if j.Cal != nil && j.Cal.Branches[i].Fitted {
			off = math.Abs(math.Log(j.Cal.Branches[i].Ratio))
		}
		rows = append(rows, row{i, off})
	}
	n := len(rows)
	if n > max {
		sort.SliceStable(rows, func(a, b int) bool { return rows[a].off > rows[b].off })
		rows = rows[:max]
	}
	shown := make(map[int]bool, len(rows))
	for _, r := range rows {
		shown[r.i] = true
	}
	return shown, n
}

// printFit prints the fit: its verdict, a row per branch (with sheets, on a
// site of more than consoleRows branches, only those with a finding) and the
// findings.
func printFit(w io.Writer, j *job, sheets bool) {
	switch c := j.Cal; {
	case c == nil && len(j.L.Site.Readings) > 0:
		fmt.Fprintln(w, "Design only: the readings are not used; the model stays at design.")
	case c == nil:
		fmt.Fprintln(w, "No readings: nothing to fit; the model stays at design.")
	case c.DOF <= 0:
		fmt.Fprintf(w, "Fit: %d readings, no more than the unknowns they must pin down, so how well the model matches them cannot be tested.\n", len(c.Readings))
	case fitWarning(c) != "":
		fmt.Fprintf(w, "Fit: the readings disagree with the model far beyond their stated uncertainties: check units, the boundary (set point or pump curve) and the suspect readings before trusting the plan.\n")
	default:
		fmt.Fprintf(w, "Fit: the model matches the %d readings within their stated uncertainties.\n", len(c.Readings))
	}
	if c := j.Cal; c != nil && !c.Converged {
		fmt.Fprintf(w, "The fit stopped before it settled (%s): treat its figures with care.\n", c.Status)
	}
	fmt.Fprintln(w)
	u := j.opts.Units
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "branch\tresistance ÷ design (95 %% range)\tvalve\tflow as found (%s)\tdesign (%s)\tflags\n", u.FlowUnit, u.FlowUnit)
	short := sheets && len(j.L.Model.Branches) > consoleRows
	var shown map[int]bool
	flagged := 0
	if short {
		shown, flagged = j.fitRowsShown(consoleRows)
	}
	for i, b := range j.L.Model.Branches {
		if short && !shown[i] {
			continue // the whole table is in calibration.csv
		}
		ratio, valve := "-", "-"
		if j.Cal != nil {
			bf := j.Cal.Branches[i]
			if bf.Fitted {
				ratio = fmt.Sprintf("%.2f (%.2f-%.2f)", bf.Ratio, bf.Lo, bf.Hi)
			}
			if b.Valve != nil {
				valve = valveWord(bf.Valve)
			}
			if bf.Held {
				valve = heldWord(&bf)
			}
		}
		flow := u.flowNum(j.Before.Flow(i)) + " (model)"
		if q, ok := j.flowRead(b.ID); ok {
			flow = u.flowNum(q) + " (read)"
		}
		flags := j.flagsOf(b.ID)
		if flags == "" {
			flags = "-"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\n", b.ID, ratio, valve, flow, u.flowNum(b.Design), flags)
	}
	tw.Flush()
	if j.Cal != nil {
		for _, cf := range j.Cal.Controllers {
			wrap(w, "", fmt.Sprintf("Differential controller on %s: recorded at %s; the survey puts what it held at %s (95 %% %s to %s).",
				cf.ID, u.diff(cf.Recorded), u.diff(cf.Held), u.diffNum(cf.Lo), u.diff(cf.Hi)))
		}
	}
	switch {
	case short && flagged > len(shown):
		wrap(w, "", fmt.Sprintf("The %d branches with a finding furthest from design, of %d with a finding among %d: every branch is in calibration.csv and the report.", len(shown), flagged, len(j.L.Model.Branches)))
	case short:
		wrap(w, "", fmt.Sprintf("The branches with a finding, of %d: every branch is in calibration.csv and the report.", len(j.L.Model.Branches)))
	}
	if short && len(j.Findings) > consoleRows {
		// Each finding's action is in step 2 of the plan; the evidence
		// of every one is in findings.csv and the report.
		var codes []string
		count := map[string]int{}
		for _, f := range j.Findings {
			c := fmt.Sprintf("%s, %s", f.Code, f.Severity)
			if count[c] == 0 {
				codes = append(codes, c)
			}
			count[c]++
		}
		fmt.Fprintf(w, "\nFindings: %d, each with its evidence in findings.csv and the report\n", len(j.Findings))
		for _, c := range codes {
			fmt.Fprintf(w, "  - %s: %d\n", c, count[c])
		}
	} else if len(j.Findings) > 0 {
		fmt.Fprintln(w, "\nFindings")
		for _, f := range j.Findings {
			where := f.Branch
			if f.Reading != "" {
				where = f.Reading
			}
			wrap(w, "  - ", fmt.Sprintf("%s (%s, %s): %s. Do: %s.", where, f.Code, f.Severity, f.Message, f.Action))
		}
	}
	fmt.Fprintln(w)
}

// settle works out the answers the job keeps by branch (flowRead's and
// flagsOf's) before the outputs are rendered side by side, which then
// only read the job.
func (j *job) settle() {
	j.flowRead("")
	j.flagsOf("")
}

// flowRead is the flow read on branch id in the as-found state: a clamp-on
// or other independent reading first, else the valve meter's; false when the
// survey read none. A valve meter's flow at a valve the fit finds off its
// table (set elsewhere, or holding one Kv) is not a flow: the meter turned
// its differential into one with the table at the recorded setting, so the
// model's flow is shown for it instead.
func (j *job) flowRead(id string) (float64, bool) {
	if j.flowsRead == nil {
		j.flowsRead = map[string]float64{}
		clamp := map[string]bool{}
		for _, ri := range j.Before.State.Readings {
			r := j.L.Site.Readings[ri]
			if !r.What.IsFlow() || clamp[r.Where] {
				continue
			}
			if r.Instrument == "valve-meter" && j.offTable(r.Where) {
				continue
			}
			if r.Instrument != "valve-meter" {
				// The first reading not by valve meter wins.
				j.flowsRead[r.Where], clamp[r.Where] = r.Value, true
				continue
			}
			if _, ok := j.flowsRead[r.Where]; !ok {
				j.flowsRead[r.Where] = r.Value
			}
		}
	}
	q, ok := j.flowsRead[id]
	return q, ok
}

// offTable reports whether the fit finds branch id's valve off its table at
// its recorded settings.
func (j *job) offTable(id string) bool {
	i, ok := j.L.Model.Index(id)
	if j.Cal == nil || !ok || i >= len(j.Cal.Branches) {
		return false
	}
	h := j.Cal.Branches[i].Valve.Hypothesis
	return h == calibrate.SetElsewhere || h == calibrate.HoldsOneKv
}

// printJSON prints the job's result as one JSON document on w: the fit
// (calibration.json's content) for fit, the plan (plan.json's) for plan,
// both under "calibration" and "plan" for run and demo. SI units, named in
// every key.
func printJSON(w io.Writer, j *job, o *runOptions, generated string) error {
	switch {
	case o.writeFit && (o.writePlan || o.writeReport):
		return writeJSON(w, struct {
			Calibration calibrationJSON `json:"calibration"`
			Plan        planJSON        `json:"plan"`
		}{j.calibrationOut(generated), j.planOut(generated)})
	case o.writeFit:
		return writeJSON(w, j.calibrationOut(generated))
	default:
		return writeJSON(w, j.planOut(generated))
	}
}
