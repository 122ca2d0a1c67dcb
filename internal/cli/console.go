package cli

import (
	"fmt"
	"io"
	"regexp"
	"strings"
	"text/tabwriter"

	"flowset/internal/report"
	"flowset/internal/site"
)

// consoleRows is the most rows a table of the plan gets on the console when
// the whole table is also written to a file (sheets): a large site's
// console says what to do and where the full tables are, not thousands of
// rows.
const consoleRows = 100

// remedyPrefix starts each line of the shortfall that says what would fix
// it (shortLines).
const remedyPrefix = "What would fix it: "

// capRemedies keeps the first max of the shortfall's fixes and says how many
// more there are and where they all are: a large site short everywhere can
// have a fix per branch (tens of thousands of lines), which the console
// cannot carry and plan.json and the report list in full.
func capRemedies(lines []string, max int) []string {
	var out []string
	n := 0
	for _, l := range lines {
		if strings.HasPrefix(l, remedyPrefix) {
			n++
			if n > max {
				continue
			}
		}
		out = append(out, l)
	}
	if n <= max {
		return lines
	}
	// The summary goes after the last fix kept, before the closing advice.
	for i := len(out) - 1; i >= 0; i-- {
		if strings.HasPrefix(out[i], remedyPrefix) {
			more := fmt.Sprintf("%d more fixes like these: every one is in plan.json (\"remedies\") and in the report.", n-max)
			return append(out[:i+1], append([]string{more}, out[i+1:]...)...)
		}
	}
	return out
}

// printVisit prints the plan in the order of work on site, from the same
// view as the report's first pages: each message once, warnings in one
// block, no cut cells. With sheets (the field sheet and report are being
// written) a table longer than consoleRows is summarised and the file named.
func printVisit(w io.Writer, j *job, sheets bool) {
	v := j.visit(j.opts.Units)
	if len(v.Short) > 0 {
		fmt.Fprintln(w, "THIS PLAN CANNOT MEET ITS TARGETS")
		short := v.Short
		if sheets {
			short = capRemedies(short, maxIDs)
		}
		bullets(w, short)
		fmt.Fprintln(w)
	}
	if j.Plan.DesignOnly {
		fmt.Fprintln(w, "Plan from design data only: no survey calibrated the model; expect to fine-tune on site.")
		fmt.Fprintln(w)
	}
	in0, n, in1 := j.toleranceCounts()
	fmt.Fprintf(w, "Branches in tolerance (%+.0f %% to %+.0f %% of target): %d of %d as found, %d of %d after the plan.\n\n",
		100*j.Plan.ToleranceLow, 100*j.Plan.ToleranceHigh, in0, n, in1, n)
	fmt.Fprintln(w, "1. Before you start")
	bullets(w, v.BeforeStart)
	fmt.Fprintln(w, "\n2. Fix first")
	if len(v.Fixes) == 0 {
		fmt.Fprintln(w, "  No fault found: nothing to put right before setting the valves.")
	}
	// A large site's fixes: those asking the same in the same words as
	// one, and a saving said once until it changes.
	fixes, large := v.Fixes, sheets && len(v.Fixes) > consoleRows
	if large {
		fixes = groupFixes(fixes)
	}
	var saves string
	for _, f := range fixes {
		wrap(w, "  - ", f.Where+": "+f.Action+".")
		if f.Saves != "" && !(large && f.Saves == saves) {
			wrap(w, "    ", "Saves: "+f.Saves+".")
			saves = f.Saves
		}
		if f.ReadAfter != "" {
			wrap(w, "    ", "Read after: "+f.ReadAfter+".")
		}
	}
	fmt.Fprintln(w, "\n3. Pump")
	wrap(w, "  ", v.Pump.From+" → "+v.Pump.To)
	wrap(w, "  ", "Set at: "+v.Pump.Where+".")
	for _, l := range v.Pump.Pumps {
		wrap(w, "  ", l)
	}
	if e := j.energyLine(); e != "" {
		fmt.Fprintf(w, "  Energy: %s.\n", e)
	}
	fmt.Fprintln(w, "\n4. Valve settings, in adjustment order")
	if sheets && len(v.Settings.Rows) > consoleRows {
		wrap(w, "  ", fmt.Sprintf("%d valves to set (%d to move from where they were found): the settings, in this order, are in field-sheet.csv, field-sheet.xlsx and the report.",
			len(v.Settings.Rows), moved(v.Settings)))
	} else {
		wrap(w, "  ", v.OrderReason)
		table(w, v.Settings)
	}
	if len(v.Remedied.Rows) > 0 {
		fmt.Fprintf(w, "\n  %s\n", v.Remedied.Title)
		if sheets && len(v.Remedied.Rows) > consoleRows {
			wrap(w, "  ", "In the report, beside the settings above.")
			for _, n := range v.Remedied.Notes {
				wrap(w, "  ", n)
			}
		} else {
			table(w, v.Remedied)
		}
	}
	fmt.Fprintln(w, "\n5. Prove it: read these after setting")
	if sheets && len(v.Prove.Rows) > consoleRows {
		n := len(v.Prove.Rows)
		v.Prove.Rows = v.Prove.Rows[:consoleRows]
		table(w, v.Prove)
		wrap(w, "  ", fmt.Sprintf("... and %d more: the whole list of %d is in the report.", n-consoleRows, n))
	} else {
		table(w, v.Prove)
	}
	warns := v.Pump.Warnings
	if len(warns) > 0 {
		fmt.Fprintln(w, "\nWarnings")
		bullets(w, warns)
	}
	fmt.Fprintln(w, "\nThese are predictions: verify each setting with a reading at the valve's test points.")
}

// groupFixes joins the fixes that ask the same thing in the same words
// (every branch that cannot reach its target at the present pump, say)
// into one, naming all their branches, in the order each first appears: a
// large site's console lists every branch needing action without a
// paragraph each.
func groupFixes(fs []report.Fix) []report.Fix {
	var out []report.Fix
	at := map[report.Fix]int{}
	for _, f := range fs {
		key := f
		key.Where = ""
		if k, ok := at[key]; ok {
			out[k].Where += ", " + f.Where
			continue
		}
		at[key] = len(out)
		out = append(out, f)
	}
	return out
}

// moved counts the rows of a settings table whose valve is set somewhere
// other than where it was found.
func moved(t report.Table) int {
	var n int
	for _, r := range t.Rows {
		if r[3] != "" && r[4] != "" && !strings.HasPrefix(r[4], r[3]) {
			n++
		}
	}
	return n
}

// planNotes are the plan's own warnings the visit does not already say in
// its steps (the saving of a repair is in step 2, shortfalls at the top).
// On a large site the branches read as restricted only through their own
// valves' test points (one warning each) are said in one line: how many,
// the first few and where every one is.
func (j *job) planNotes() []string {
	var out []string
	var unconfirmed []string
	at := -1
	for _, w := range j.Plan.Warnings {
		// Said elsewhere in plain words: repairs in step 2, the pump's
		// shortfall and its remedies at the top, the doubt below.
		if isRemedyWarning(w) || strings.Contains(w, "sd of ln") || strings.Contains(w, "above its maximum") ||
			strings.Contains(w, "more uncertain parameters") {
			continue
		}
		if m := unconfirmedNote.FindStringSubmatch(w); m != nil {
			if at < 0 {
				at = len(out)
			}
			unconfirmed = append(unconfirmed, fmt.Sprintf("%s (%s times)", m[1], m[2]))
		}
		out = append(out, w)
	}
	if len(unconfirmed) > maxIDs {
		grouped := fmt.Sprintf("%d branches read as well above their design resistance, but only through their own valves' test points: %s; each one's setting is planned at design until a flow read another way (clamp-on) confirms it; if confirmed, re-plan with that reading (plan.json and --json list every one)", len(unconfirmed), joinIDs(unconfirmed))
		kept := append([]string{}, out[:at]...)
		kept = append(kept, grouped)
		for _, w := range out[at:] {
			if !unconfirmedNote.MatchString(w) {
				kept = append(kept, w)
			}
		}
		out = kept
	}
	if j.uncertainIndex() != "" {
		out = append(out, j.uncertainIndex())
	}
	return out
}

// unconfirmedNote is the plan's warning on a branch read as restricted
// only through its own valve's test points (runJob writes it).
var unconfirmedNote = regexp.MustCompile(`^(\S+) reads as (\S+) times its design resistance, but only through its own valve's test points: `)

// uncertainIndex says, in plain words, when the plan's pump differential
// rests on a branch the survey pinned down poorly; "" otherwise.
func (j *job) uncertainIndex() string {
	p := j.Plan
	if !finite(p.LeastHigh) || p.LeastHigh <= 1.02*p.Least {
		return ""
	}
	u := j.opts.Units
	// The doubt is worked out on the exact settings (Least); it is added
	// to the plan's own differential so the figures quoted agree.
	return fmt.Sprintf("The readings leave some doubt: the circuit may need up to %s rather than %s. Read the index branch %s after setting and raise the pump if it is short.", u.diff(p.Required+p.LeastHigh-p.Least), u.diff(p.Required), p.Index)
}

// energyLine is the pump power and energy change in plain words, or "" when
// there is none to quote (no pump power worked out, or a short plan).
func (j *job) energyLine() string {
	pp := j.Plan.Pump
	if j.short() || !pp.HaveBefore || pp.ElectricalBefore <= 0 {
		return ""
	}
	word, kwh, cost := "saved", pp.AnnualEnergySaving, pp.AnnualCostSaving
	if round0(kwh) < 0 {
		word, kwh, cost = "more", -kwh, -cost
	}
	s := fmt.Sprintf("pump power %s → %s, about %.0f kWh a year %s", power(pp.ElectricalBefore), power(pp.ElectricalAfter), round0(kwh), word)
	if finite(cost) {
		s += fmt.Sprintf(" (%.0f %s)", round0(cost), pp.Currency)
	}
	return s
}

func bullets(w io.Writer, lines []string) {
	for _, l := range lines {
		wrap(w, "  - ", l)
	}
}

// wrapWidth is the console line width text is wrapped to.
const wrapWidth = 100

// wrap prints s wrapped at word boundaries, the first line after lead and
// the others indented to match.
func wrap(w io.Writer, lead, s string) {
	pad := strings.Repeat(" ", len([]rune(lead)))
	line := lead
	n := len([]rune(lead))
	for _, word := range strings.Fields(s) {
		lw := len([]rune(word))
		if n > len([]rune(pad)) && n+1+lw > wrapWidth {
			fmt.Fprintln(w, line)
			line, n = pad+word, len([]rune(pad))+lw
			continue
		}
		if n > len([]rune(pad)) {
			line += " "
			n++
		}
		line += word
		n += lw
	}
	fmt.Fprintln(w, line)
}

// table prints a report table in aligned columns, whole cells, no write-in
// columns (those are for paper).
func table(w io.Writer, t report.Table) {
	if len(t.Rows) == 0 {
		for _, n := range t.Notes {
			wrap(w, "  ", n)
		}
		return
	}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "  "+strings.Join(t.Columns, "\t"))
	for _, r := range t.Rows {
		cells := make([]string, len(r))
		for k, c := range r {
			if c == "" {
				c = "-"
			}
			cells[k] = c
		}
		fmt.Fprintln(tw, "  "+strings.Join(cells, "\t"))
	}
	tw.Flush()
	for _, n := range t.Notes {
		wrap(w, "  ", n)
	}
}

// printWarnings lists the site's warnings once, in one block; a warning on
// a reading that a finding of the fit explains points to that finding.
func printWarnings(w io.Writer, probs site.Problems, j *job) {
	var warns site.Problems
	for _, p := range probs {
		if p.Severity == site.SeverityWarning {
			warns = append(warns, p)
		}
	}
	if len(warns) == 0 {
		return
	}
	at := map[site.Pos]string{}
	for _, r := range j.L.Site.Readings {
		at[r.Pos] = r.Where
	}
	explained := j.explainedBranches()
	lines := make([]string, 0, len(warns))
	for _, p := range warns {
		line := p.Error()
		if b, ok := at[site.Pos{File: p.File, Line: p.Line}]; ok && explained[b] != "" {
			line += fmt.Sprintf(" [the fit explains it: %s: %s; see step 2]", b, explained[b])
		}
		lines = append(lines, line)
	}
	for _, l := range capWarnings(lines, consoleRows) {
		fmt.Fprintln(w, l)
	}
}

// capWarnings keeps the first max of a job's warnings and says how many
// more there are and where every one is: a large building can have a
// warning for each small valve differential (1,424 at 10,000 branches,
// 56,000 at 100,000), which `flowset check` lists in full, each with its
// line, and the report groups.
func capWarnings(lines []string, max int) []string {
	if len(lines) <= max {
		return lines
	}
	return append(lines[:max:max], fmt.Sprintf("... and %d more warnings: 'flowset check' on the site lists every one with its line; the report groups them.", len(lines)-max))
}

// shortError ends a fit, plan or run whose plan cannot meet its targets
// (ExitShort): the outputs are written and say so at the top.
type shortError struct{ n int }

func (e *shortError) Error() string {
	if e.n == 1 {
		return "the plan cannot meet its targets: 1 branch stays short (see the top of the plan)"
	}
	return fmt.Sprintf("the plan cannot meet its targets: %d branches stay short (see the top of the plan)", e.n)
}

// toleranceCounts counts the branches of the plan (risers included) inside
// the tolerance band as found and after the plan, and their number. The
// console, the report and the field sheet all count with it.
func (j *job) toleranceCounts() (before, n, after int) {
	p := j.Plan
	for _, b := range p.Branches {
		n++
		if b.InTolerance {
			after++
		}
		i := j.branchIndex(b.ID)
		if i < 0 || !(b.Target > 0) {
			continue
		}
		r := j.Before.Flow(i) / b.Target
		if r >= 1+p.ToleranceLow && r <= 1+p.ToleranceHigh {
			before++
		}
	}
	return before, n, after
}
