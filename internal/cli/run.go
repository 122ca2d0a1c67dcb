package cli

import (
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

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
	// builtin is set for demo: the site is built in, not a path.
	builtin bool
	job     jobOptions
	// what to write
	writeFit, writePlan, writeReport bool
}

func addJobFlags(cmd *cobra.Command, o *runOptions, plan bool) {
	cmd.Flags().StringVar(&o.Out, "out", "", "output folder (must not exist unless --force)")
	cmd.Flags().BoolVar(&o.Force, "force", false, "replace an existing output folder")
	cmd.Flags().BoolVar(&o.Quiet, "quiet", false, "no progress messages on stderr")
	cmd.Flags().Float64Var(&o.job.Thresholds.Restricted, "restricted-ratio", 1.5, "resistance ratio above which a branch is flagged restricted (1/ratio for free)")
	cmd.Flags().Float64Var(&o.job.Thresholds.Confidence, "confidence", 0.95, "probability a ratio must have of passing its threshold to be flagged")
	cmd.Flags().Float64Var(&o.job.Thresholds.SuspectZ, "suspect-z", 3, "normalised residual above which a reading is suspect")
	o.job.Scale = 1 // fit has no --scale; its plan-free job checks the same
	if plan {
		cmd.Flags().Float64Var(&o.job.Scale, "scale", 1, "balance to this fraction of the design (or target) flows, e.g. 0.9")
		cmd.Flags().StringVar(&o.job.Rounding, "rounding", "smart", "valve setting rounding: smart (keep branches in tolerance) or nearest")
		cmd.Flags().BoolVar(&o.job.DesignOnly, "design-only", false, "plan from the design data, ignoring the readings")
	}
}

func (o *runOptions) validate(needOut bool) error {
	if needOut && o.Out == "" {
		return usagef("--out is required: name a folder for the outputs")
	}
	if o.job.Rounding != "" && o.job.Rounding != "smart" && o.job.Rounding != "nearest" {
		return usagef("--rounding %q: want smart or nearest", o.job.Rounding)
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
and the findings. DIR must not exist unless --force is given; it is written
whole or not at all.`, true)
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
			if err := o.validate(true); err != nil {
				return err
			}
			return runMain(cmd.Context(), ios, o, func(_ string, w io.Writer) (*loaded, error) { return loadEmbedded(name, w) })
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
type loader func(path string, w io.Writer) (*loaded, error)

// loadEmbedded reads a built-in site.
func loadEmbedded(name string, w io.Writer) (*loaded, error) {
	s, probs, err := site.ReadDir(surveys.FS, name)
	if err != nil {
		return nil, &dataError{err}
	}
	return finishLoad(s, probs, "built-in site "+name, w)
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
		defer func() { claim.finish(err == nil) }()
	}
	pr.step("reading %s", shown(o.Site))
	l, err := load(o.Site, ios.Err)
	if err != nil {
		return err
	}
	for _, p := range l.Problems {
		fmt.Fprintf(ios.Err, "%s: %v\n", p.Severity, p)
	}
	j, err := runJob(ctx, l, &o.job, pr)
	if err != nil {
		return err
	}
	generated := ios.now().UTC().Format("2006-01-02 15:04 MST")
	if o.writeFit {
		printFit(ios.Out, j)
	}
	if o.writePlan {
		printPlan(ios.Out, j)
	}
	if o.Out == "" {
		return nil
	}
	var in report.Input
	if o.writeReport {
		pr.step("drawing the report")
		if in, err = j.reportInput(ctx, generated); err != nil {
			return &dataError{fmt.Errorf("report: %w", err)}
		}
	}
	pr.step("writing %s", shown(o.Out))
	err = claim.writeDir(ctx, func(create func(string) (io.WriteCloser, error)) error {
		put := func(name string, write func(io.Writer) error) error {
			w, err := create(name)
			if err != nil {
				return err
			}
			if err := write(w); err != nil {
				w.Close()
				return fmt.Errorf("%s: %w", name, err)
			}
			return w.Close()
		}
		if o.writeFit || o.writeReport {
			if err := put("calibration.json", func(w io.Writer) error { return writeJSON(w, j.calibrationOut(generated)) }); err != nil {
				return err
			}
			h, rows := j.fitRows()
			if err := put("calibration.csv", func(w io.Writer) error { return writeCSV(w, h, rows) }); err != nil {
				return err
			}
			h, rows = j.findingRows()
			if err := put("findings.csv", func(w io.Writer) error { return writeCSV(w, h, rows) }); err != nil {
				return err
			}
			h, rows = j.readingRows()
			if err := put("readings.csv", func(w io.Writer) error { return writeCSV(w, h, rows) }); err != nil {
				return err
			}
		}
		if o.writePlan || o.writeReport {
			h, rows := j.Plan.Rows()
			if err := put("field-sheet.csv", func(w io.Writer) error { return writeCSV(w, h, rows) }); err != nil {
				return err
			}
			about := append([]string{j.L.Site.Name, "generated " + generated}, j.Plan.Summary()...)
			about = append(about, report.DefaultCautions()...)
			if err := put("field-sheet.xlsx", func(w io.Writer) error { return writeWorkbook(w, h, rows, about) }); err != nil {
				return err
			}
			if err := put("plan.json", func(w io.Writer) error { return writeJSON(w, j.planOut(generated)) }); err != nil {
				return err
			}
		}
		if o.writeReport {
			if err := put("report.html", func(w io.Writer) error { return report.Write(w, in) }); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return err
	}
	if o.writeReport {
		fmt.Fprintf(ios.Out, "\nreport: %s\n", shown(filepath.Join(o.Out, "report.html")))
	}
	fmt.Fprintf(ios.Out, "outputs written to %s\n", shown(o.Out))
	return nil
}

func printFit(w io.Writer, j *job) {
	switch c := j.Cal; {
	case c == nil && len(j.L.Site.Readings) > 0:
		fmt.Fprintln(w, "design only: the readings are not used; the model stays at design")
	case c == nil:
		fmt.Fprintln(w, "no readings: nothing to fit; the model stays at design")
	case c.DOF <= 0:
		// With no degrees of freedom left a reduced chi-square is undefined.
		fmt.Fprintf(w, "calibration: %s after %d iterations, chi-square %.1f with no degrees of freedom left (as many effective parameters as readings), so the fit cannot be tested\n\n",
			c.Status, c.Iterations, c.ChiSquare)
	default:
		fmt.Fprintf(w, "calibration: %s after %d iterations, chi-square %.1f on %d degrees of freedom (reduced %.2f)\n\n",
			c.Status, c.Iterations, c.ChiSquare, c.DOF, c.ReducedChiSquare)
	}
	if note := fitWarning(j.Cal); note != "" {
		fmt.Fprintf(w, "warning: %s\n\n", note)
	}
	h, rows := j.fitRows()
	cols := []int{0, 1, 2, 3, 5, 7, 8, 9}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	for _, c := range cols {
		fmt.Fprintf(tw, "%s\t", h[c])
	}
	fmt.Fprintln(tw)
	for _, r := range rows {
		for _, c := range cols {
			v := r[c]
			if v == "" {
				v = "-"
			}
			fmt.Fprintf(tw, "%s\t", clip(v, 22))
		}
		fmt.Fprintln(tw)
	}
	tw.Flush()
	if len(j.Findings) > 0 {
		fmt.Fprintln(w, "\nfindings:")
		for _, f := range j.Findings {
			where := f.Branch
			if f.Reading != "" {
				where = f.Reading
			}
			fmt.Fprintf(w, "  %-7s %-19s %s: %s\n          %s\n", f.Severity, f.Code, where, f.Message, f.Evidence)
		}
	}
	fmt.Fprintln(w)
}

func printPlan(w io.Writer, j *job) {
	for _, line := range j.Plan.Summary() {
		fmt.Fprintln(w, line)
	}
	fmt.Fprintln(w)
	h, rows := j.Plan.Rows()
	// Order, Branch, Valve, As-found, New, Target, Predicted %, Check diff.
	cols := []int{0, 1, 4, 6, 7, 9, 11, 15}
	names := []string{"#", "branch", "valve", "now", "set to", "target l/s", "% target", "check kPa"}
	_ = h
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, strings.Join(names, "\t")+"\t")
	for _, r := range rows {
		for _, c := range cols {
			v := r[c]
			if v == "" {
				v = "-"
			}
			fmt.Fprintf(tw, "%s\t", clip(v, 16))
		}
		fmt.Fprintln(tw)
	}
	tw.Flush()
	for _, wn := range j.Plan.Warnings {
		fmt.Fprintf(w, "warning: %s\n", wn)
	}
	for _, u := range j.Plan.Unmet {
		fmt.Fprintf(w, "cannot meet: %s at %.0f %% of target: %s\n", u.ID, u.Percent, u.Reason)
	}
	fmt.Fprintln(w, "\nThese are predictions: verify each setting with a reading at the valve's test points.")
}
