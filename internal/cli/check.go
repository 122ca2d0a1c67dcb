package cli

import (
	"context"
	"fmt"
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
	for _, st := range sum.States {
		if st.Pump != "" {
			fmt.Fprintf(w, "  state %-20s %d readings, pump at %s\n", st.State, st.Readings, st.Pump)
			continue
		}
		fmt.Fprintf(w, "  state %-20s %d readings\n", st.State, st.Readings)
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
