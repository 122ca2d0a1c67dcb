package cli

import (
	"context"
	"encoding/csv"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"flowset/internal/site"
)

type checkOptions struct {
	Site string
}

func newCheckCmd(ios *IO) *cobra.Command {
	opts := &checkOptions{}
	return &cobra.Command{
		Use:   "check SITE",
		Short: "Validate a site's sheets and summarise what was measured",
		Long: `Check reads a site (a folder of CSV sheets or an .xlsx workbook), reports
every problem with its file, line, column and field, and otherwise prints a
summary: the branches, the readings in each survey state, what each branch
was measured with, and what is missing for a calibration.

Exit status: 0 when the site is usable (warnings may be printed), 1 when it
has errors, 2 for a wrong command line.`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.Site = args[0]
			return runCheck(cmd.Context(), ios, opts)
		},
	}
}

func runCheck(ctx context.Context, ios *IO, opts *checkOptions) error {
	if blankSite(opts.Site) {
		// A sheet with a header and no rows is a sheet not filled in yet:
		// a blank template is not a site with errors.
		fmt.Fprintf(ios.Out, "%s: a blank site (headers and help rows only): nothing to check yet.\nFill in branches.csv and readings.csv at least; 'flowset help sheets' says how.\n", shown(opts.Site))
		return nil
	}
	l, err := loadSite(ctx, opts.Site, ios.Out)
	if err != nil {
		return err
	}
	printProblems(ios.Out, l.Problems)
	printSummary(ios, l.Site)
	return nil
}

func printSummary(ios *IO, s *site.Site) {
	sum := s.Summary()
	w := ios.Out
	fmt.Fprintf(w, "site %q: %d branches (%d risers), %d valve models, %d pump points, %d readings\n",
		s.Name, sum.Branches, sum.Risers, sum.Valves, sum.PumpPoints, sum.Readings)
	for _, b := range s.Branches {
		if c := b.Controller; c.Has() {
			rng := "range not given"
			if lo, hi := c.Range(); lo > 0 || !math.IsInf(hi, 1) {
				rng = fmt.Sprintf("range %s-%s kPa", kpa(lo), kpa(hi))
			}
			span := "partner valve and every branch below"
			if c.Below() {
				span = "the branches below alone"
			}
			fmt.Fprintf(w, "  differential controller on %s: holds %.1f kPa across its span (%s), Kvs %.3g, %s\n",
				site.Printable(b.ID), c.SetPoint/1e3, span, c.Kvs, rng)
		}
	}
	if ids := s.Pumps(); len(ids) > 1 {
		how := "in parallel"
		if s.PumpSeries {
			how = "in series"
		}
		n := s.Running("")
		fmt.Fprintf(w, "  %d pumps %s (%s), %d running", len(ids), how, joinIDs(ids), n)
		if n < len(ids) {
			fmt.Fprintf(w, " (%s standing by)", joinIDs(ids[n:]))
		}
		fmt.Fprintln(w)
	}
	if s.StaticLift > 0 || s.OutletPressure > 0 {
		fmt.Fprintf(w, "  open circuit: static lift %.2f m, outlet pressure %.1f kPa (the pump gives both before any water moves)\n",
			s.StaticLift, s.OutletPressure/1e3)
	}
	if s.Density > 0 || s.Viscosity > 0 || s.KinematicViscosity > 0 {
		var given []string
		if s.Density > 0 {
			given = append(given, fmt.Sprintf("density %.4g kg/m3", s.Density))
		}
		if s.Viscosity > 0 {
			given = append(given, fmt.Sprintf("viscosity %.4g mPa s", s.Viscosity*1e3))
		}
		if s.KinematicViscosity > 0 {
			given = append(given, fmt.Sprintf("kinematic viscosity %.4g mm2/s", s.KinematicViscosity*1e6))
		}
		fmt.Fprintf(w, "  fluid as measured: %s (in place of the tables)\n", strings.Join(given, ", "))
	}
	for _, st := range sum.States {
		line := fmt.Sprintf("  state %-20s %d readings", st.State, st.Readings)
		if st.Moved > 0 {
			line += ", " + countOf(st.Moved, "valve") + " set by the moves sheet"
		}
		if st.Pump != "" {
			line += ", pump at " + st.Pump
		}
		fmt.Fprintln(w, line)
	}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "branch\treadings\tmeasured with")
	for _, b := range sum.Measured {
		var by []string
		for _, m := range b.By {
			by = append(by, m.String())
		}
		if len(by) == 0 {
			by = []string{"-"}
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\n", b.ID, b.Readings, strings.Join(by, "; "))
	}
	tw.Flush()
	if len(sum.Missing) == 0 {
		fmt.Fprintln(w, "nothing missing for a calibration")
		return
	}
	fmt.Fprintln(w, "missing for a calibration:")
	for _, m := range sum.Missing {
		fmt.Fprintf(w, "  - %s\n", m)
	}
}

// exactArgs is cobra.ExactArgs with a usage error.
func exactArgs(n int) cobra.PositionalArgs {
	return func(cmd *cobra.Command, args []string) error {
		if len(args) != n {
			return usagef("%s: takes %d argument(s), got %d\nusage: %s", cmd.Name(), n, len(args), cmd.UseLine())
		}
		return nil
	}
}

// maxBlankSheet is the largest sheet blankSite reads: a blank template's
// sheets are a header and a help row, far below it.
const maxBlankSheet = 64 << 10

// blankSite reports whether path is a folder of CSV sheets none of which
// has a data row: only headers, "#" help rows and blank lines, as
// 'flowset template' writes them.
func blankSite(path string) bool {
	st, err := os.Stat(path)
	if err != nil || !st.IsDir() {
		return false
	}
	names, err := filepath.Glob(filepath.Join(path, "*.csv"))
	if err != nil || len(names) == 0 {
		return false
	}
	for _, n := range names {
		fi, err := os.Stat(n)
		if err != nil || !fi.Mode().IsRegular() || fi.Size() > maxBlankSheet {
			return false
		}
		b, err := os.ReadFile(n)
		if err != nil {
			return false
		}
		r := csv.NewReader(strings.NewReader(strings.TrimPrefix(string(b), "\ufeff")))
		r.FieldsPerRecord, r.LazyQuotes, r.Comment = -1, true, '#'
		recs, err := r.ReadAll()
		if err != nil {
			return false
		}
		rows := 0
		for _, rec := range recs {
			// The site sheet lists its keys with blank values: a row
			// counts once a value is filled in. Elsewhere any cell does.
			cells := rec
			if filepath.Base(n) == "site.csv" && len(rec) > 1 {
				cells = rec[1:2]
			}
			if strings.TrimSpace(strings.Join(cells, "")) != "" {
				rows++
			}
		}
		if rows > 1 {
			return false
		}
	}
	return true
}

// kpa prints a pressure in kPa, "any" for an unbounded end.
func kpa(p float64) string {
	if math.IsInf(p, 1) {
		return "any"
	}
	return strconv.FormatFloat(p/1e3, 'g', 4, 64)
}
