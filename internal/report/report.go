// Package report writes one self-contained, offline HTML report of a
// balancing job: header with safety cautions, summary, interactive charts
// and the field tables.
//
// The report is fed a plain view model (Input) and does no numerics beyond
// expressing flows in percent of design. Charts are built with go-echarts;
// their options are serialised here as HTML-safe JSON and drawn by constant
// code with the echarts library inlined in the page, so the file opens with
// the network off. Every user string is escaped by html/template in the
// page and passes through Clean before it reaches the chart library.
package report

import (
	"bytes"
	_ "embed"
	"encoding/json"
	"fmt"
	"html"
	"html/template"
	"io"
	"math"
	"strconv"
	"strings"
	"unicode"
)

// EChartsVersion is the version of the echarts build inlined in reports.
const EChartsVersion = "5.6.0"

// echartsJS is the full build of Apache ECharts from the npm package
// "echarts" (the reduced builds lack the custom series used for error bars
// and bands). Apache License 2.0; LICENSE and NOTICE are beside it.
//
//go:embed assets/echarts.min.js
var echartsJS string

//go:embed assets/LICENSE
var echartsLicense string

//go:embed assets/NOTICE
var echartsNotice string

//go:embed assets/report.js
var reportJS string

//go:embed report.tmpl
var pageTmpl string

// section is one chart section of the page.
type section struct {
	ID, Title string
	Intro     string
	Notes     []string
	Charts    []chart
	Small     bool // small multiples with the branch key
	Finder    bool // the branch finder of a large site
}

type summaryRow struct {
	Label, Before, After string
}

type pageData struct {
	In       *Input
	PageHead template.CSS // quoted site and date for the printed page header, reduced to plain characters
	Cautions []string
	HowTo    []string
	Summary  []summaryRow
	// AfterHead heads the summary's second column ("After plan", or "As
	// left" for the round after setting).
	AfterHead string
	Faults    []string
	More      int
	Sections  []section
	Tables    []viewTable
	// The visit's tables as written: whole, or a page of a long one; Fixes
	// only when the fixes are shown a page at a time.
	Fixes, Settings, Remedied, Prove viewTable
	// Warnings of the site check, grouped by kind.
	Warnings      []warnGroup
	WarningsWhere string
	// Trim is the round after setting (nil for a visit): its chart of
	// as found, predicted and as left, its list of trims and its
	// branch-by-branch table.
	Trim      *Trim
	TrimChart []chart
	TrimNote  string
	Trims     viewTable
	TrimAll   viewTable
	// Large is the large-site form; Branches and Flagged count the
	// branches for the finder.
	Large             bool
	Branches, Flagged string
	Page              int
	ECharts           template.JS
	Data              template.JS
	Script            template.JS
	License           string
	Notice            string
	Version           string
}

// maxFaults is the most faults listed in the summary; the diagnosis table
// has them all.
const maxFaults = 10

var tmpl = template.Must(template.New("report").Funcs(template.FuncMap{
	"add":    func(a, b int) int { return a + b },
	"letter": letter,
	"dash":   dash,
	"nowrap": nowrap,
	"keep":   keepIDs,
	"count":  thousands,
}).Parse(pageTmpl))

// keepIDs escapes s for HTML and wraps each short word holding a hyphen
// ("AHU-2's", "FCU-R.3") in a span kept on one line, so a line of text
// never breaks inside an identifier. Everything else is plain escaped text.
func keepIDs(s string) template.HTML {
	var b strings.Builder
	for i, w := range strings.Split(s, " ") {
		if i > 0 {
			b.WriteByte(' ')
		}
		e := html.EscapeString(w)
		if strings.Contains(w, "-") && len([]rune(w)) <= maxNoWrap {
			b.WriteString(`<span class="id">` + e + `</span>`)
			continue
		}
		b.WriteString(e)
	}
	return template.HTML(b.String())
}

// letter numbers the appendix's parts: 0 is B (A is the summary), 25 is Z,
// then AA, AB and so on.
func letter(i int) string {
	i++ // A is the summary
	s := ""
	for {
		s = string(rune('A'+i%26)) + s
		i = i/26 - 1
		if i < 0 {
			return s
		}
	}
}

// maxNoWrap is the longest cell kept on one line: identifiers and numbers
// ("FCU-R.1", "3.8 turns") must not break at a hyphen or a space, but a
// long text must still wrap rather than widen the page.
const maxNoWrap = 24

// nowrap reports whether a table cell is short enough to keep on one line.
func nowrap(s string) bool {
	return len([]rune(s)) <= maxNoWrap && !strings.Contains(s, "; ")
}

// Write writes the whole report for in to w. The output depends on in
// alone: the same Input gives byte-identical files. It returns an error
// wrapping ErrInvalid when in holds an infinite number or a ragged table.
func Write(w io.Writer, in Input) error {
	if err := in.validate(); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	p, err := build(&in)
	if err != nil {
		return err
	}
	var buf bytes.Buffer
	if err := tmpl.Execute(&buf, p); err != nil {
		return fmt.Errorf("report: render page: %w", err)
	}
	if _, err := w.Write(buf.Bytes()); err != nil {
		return fmt.Errorf("report: write: %w", err)
	}
	return nil
}

func build(in *Input) (*pageData, error) {
	p := &pageData{
		In:       in,
		Cautions: in.Cautions,
		ECharts:  template.JS(echartsJS),
		Script:   template.JS(reportJS),
		License:  echartsLicense,
		Notice:   echartsNotice,
		Version:  EChartsVersion,
	}
	if len(p.Cautions) == 0 {
		p.Cautions = DefaultCautions()
	}
	// pageHead leaves nothing that can end the quoted string or the rule.
	p.PageHead = template.CSS(`"` + pageHead(in.Site+" · "+in.Generated) + `"`)
	tol := fmt.Sprintf("%s %% to %s %%", fnum(100+in.ToleranceLow), fnum(100+in.ToleranceHigh))
	p.HowTo = []string{
		"A branch is in tolerance when its flow is within " + tol + " of its design flow.",
		"“As found” is the circuit before any change; “after plan” is the model’s prediction once the plan is carried out.",
		"Dashed lines and hollow circles mean as found; solid lines and filled diamonds mean after the plan; triangles mark flagged branches.",
		"Shaded bands and error bars are 95 % intervals: the narrower they are, the better the readings pin the value.",
		"Point at a chart for values. The tables at the end list every setting, finding and reading.",
	}
	s := &in.Summary
	p.AfterHead = "After plan"
	p.Summary = []summaryRow{
		{"Branches in tolerance (" + tol + " of design)", strconv.Itoa(s.InBefore), strconv.Itoa(s.InAfter)},
		{"Branches outside tolerance", strconv.Itoa(s.OutBefore), strconv.Itoa(s.OutAfter)},
		{"Pump set-point", dash(s.SetpointBefore), dash(s.SetpointAfter)},
		{"Pump speed, after ÷ as found", "", fnum(s.SpeedRatio)},
		{"Energy", "", dash(s.EnergySaving)},
	}
	trim := in.Trim != nil
	if trim {
		// The round after setting: the summary compares as found with
		// as left, and the appendix is the model fitted to every state.
		p.Trim, p.AfterHead = in.Trim, "As left (model)"
		p.Summary = p.Summary[:3]
		p.HowTo = []string{
			"A branch is in tolerance when its flow is within " + tol + " of its target flow.",
			"“As found” is the circuit before any change; “predicted” is what the plan the valves were set to said; “as left” is the model fitted to every survey state, the readings taken after setting included.",
			"A branch read after setting is pinned by its reading; one not read is a prediction, and its 95 % band (error bars, shaded bands) says how far it may be wrong. Only a branch whose whole band lies inside the tolerance is proven in tolerance.",
			"Dashed lines and hollow circles mean as found; solid lines mean fitted to every state; triangles mark flagged branches.",
			"Point at a chart for values. The tables at the end list every finding and reading.",
		}
	}
	p.Faults = s.Faults
	if len(p.Faults) > maxFaults {
		p.More = len(p.Faults) - maxFaults
		p.Faults = p.Faults[:maxFaults]
	}

	p.Large = large(in)
	if p.Large && !trim {
		p.HowTo[len(p.HowTo)-1] = "Point at a chart for values. The branch finder (" + letter(0) + ") holds every branch; the long tables show a page at a time, with a search box, and name the file beside this report that holds each whole."
	}
	p.Warnings, p.WarningsWhere = groupWarnings(in.Warnings), in.WarningsWhere
	data := dataSet{}
	var tx texts
	view := func(t Table, page int) viewTable {
		if !p.Large {
			return viewTable{Table: t, Data: -1, Total: len(t.Rows)}
		}
		v := data.addTable(t, page, &tx)
		if v.Paged() {
			v.Notes = append([]string{pagedNote(v)}, v.Notes...)
		}
		return v
	}

	// chartIn is what the per-branch category charts draw: every branch,
	// or on a large site the flagged and furthest from design.
	chartIn := in
	var charted []int
	if len(in.Branches) > 0 {
		pick := pickBranches(in.Branches)
		charted = pick
		sec := section{
			ID: "branches", Title: "Branch system curves", Small: true,
			Intro: "Differential across each branch against its flow: the design curve, the curve fitted to the readings with its 95 % band, and the readings with their uncertainty.",
		}
		if len(pick) < len(in.Branches) {
			where := "Every branch is in the tables."
			if trim {
				where = "Every branch is in the round’s table."
			} else if p.Large {
				where = "Every branch is in the branch finder (" + letter(0) + ")."
			}
			sec.Notes = append(sec.Notes, fmt.Sprintf("Showing %d of %s branches: those flagged, then those furthest from design as found. %s", len(pick), thousands(len(in.Branches)), where))
		}
		for k, i := range pick {
			sec.Charts = append(sec.Charts, branchChart(fmt.Sprintf("fs-branch-%d", k+1), &in.Branches[i], in))
		}
		if p.Large && trim {
			sub := *in
			sub.Branches = nil
			for _, i := range pickN(in.Branches, maxWindow) {
				sub.Branches = append(sub.Branches, in.Branches[i])
			}
			chartIn = &sub
		}
		if p.Large && !trim {
			p.Branches, p.Flagged = thousands(len(in.Branches)), thousands(flagged(in.Branches))
			p.Sections = append(p.Sections, section{
				ID: "finder", Title: "Find a branch", Finder: true,
				Intro: "Every branch, " + p.Branches + " of them: search by name, sort by how far each is from design, or show only the flagged ones (" + p.Flagged + "). Flow is in percent of design.",
			})
			sub := *in
			sub.Branches = nil
			for _, i := range pickN(in.Branches, maxWindow) {
				sub.Branches = append(sub.Branches, in.Branches[i])
			}
			chartIn = &sub
		}
		p.Sections = append(p.Sections, sec)
	}
	if trim && len(in.Branches) > 0 {
		r := section{
			ID: "resistance", Title: "Fitted resistance",
			Intro:  "Each branch’s fitted fixed resistance, from every survey state together, divided by its design resistance, with its 95 % interval. 1 (the dotted line) means as designed.",
			Charts: []chart{ratioChart("fs-ratio", chartIn)},
		}
		if len(chartIn.Branches) < len(in.Branches) {
			r.Notes = append(r.Notes, fmt.Sprintf("The %d branches flagged or furthest from design as found, of %s; the round’s table has every one.", len(chartIn.Branches), thousands(len(in.Branches))))
		}
		p.Sections = append(p.Sections, r)
	}
	if !trim {
		p.Sections = append(p.Sections, section{
			ID: "combined", Title: "Circuit and pump",
			Intro:  "The parallel branches together against the pump, as found and after the plan; the operating point is where the curves cross.",
			Charts: []chart{combinedChart("fs-combined", in)},
		})
	}
	if !trim && len(in.Branches) > 0 {
		zoom := func(sec *section) {
			if follow := map[string]string{"flow": "flow", "resistance": "ratio"}[sec.ID]; p.Large && follow != "" {
				sec.Charts[0].Follow = follow
				sec.Notes = append(sec.Notes, fmt.Sprintf("The branches on the page of the branch finder (%s), at first the %d flagged or furthest from design as found of all %s: search, sort or filter there, or page on, and the chart follows.", letter(0), len(chartIn.Branches), p.Branches))
				return
			}
			if p.Large {
				sec.Notes = append(sec.Notes, fmt.Sprintf("The %d branches flagged or furthest from design as found, of %s; the branch finder (%s) has every one.", len(chartIn.Branches), p.Branches, letter(0)))
				return
			}
			if len(in.Branches) > maxWindow {
				sec.Notes = append(sec.Notes, fmt.Sprintf("%d branches: the chart shows %d at a time; drag the slider below it to move along.", len(in.Branches), maxWindow))
			}
		}
		f := section{
			ID: "flow", Title: "Flow in percent of design",
			Intro:  "Each branch’s flow as found and as predicted after the plan, with the 95 % interval of the prediction. The shaded band is the tolerance, " + tol + " of design; the dotted line is design.",
			Charts: []chart{flowChart("fs-flow", chartIn)},
		}
		zoom(&f)
		r := section{
			ID: "resistance", Title: "Fitted resistance",
			Intro:  "Each branch’s fitted fixed resistance divided by its design resistance, with its 95 % interval. 1 (the dotted line) means as designed; well above 1 suggests a blockage or a closed valve, well below 1 a missing fitting or a bypass.",
			Charts: []chart{ratioChart("fs-ratio", chartIn)},
		}
		zoom(&r)
		v := section{
			ID: "valves", Title: "Valve settings",
			Intro:  "Each balancing valve’s setting now and as planned.",
			Charts: valveCharts("fs-valves", chartIn),
		}
		if len(v.Charts) == 0 {
			v.Notes = append(v.Notes, "No valve settings were given.")
		}
		zoom(&v)
		p.Sections = append(p.Sections, f, r, v)
	}
	if trim {
		pick := pickTrim(in.Trim.Branches)
		if len(pick) > 0 {
			p.TrimChart = []chart{trimChart("fs-trim", in, pick)}
			data.Charts = append(data.Charts, p.TrimChart...)
		}
		if len(pick) < len(in.Trim.Branches) {
			p.TrimNote = fmt.Sprintf("Showing %d of %s branches: those trimmed or needing a reading first, then those read after setting, then those furthest from target as left. Every branch is in the table below.", len(pick), thousands(len(in.Trim.Branches)))
		}
	}
	for _, sec := range p.Sections {
		data.Charts = append(data.Charts, sec.Charts...)
	}
	if p.Large && !trim {
		// The branch names go first into the string table, so that the
		// tables' branch columns refer to them.
		data.Finder = finder(in.Branches, charted, &tx)
		data.Page = pageRows
		p.Page = pageRows
	}
	p.Fixes = viewTable{Data: -1}
	if p.Large && len(in.Visit.Fixes) > fixRows {
		t := Table{Columns: []string{"Where", "What to do", "What fixing it saves", "Read after"}, File: in.Visit.FixesFile}
		for _, f := range in.Visit.Fixes {
			t.Rows = append(t.Rows, []string{f.Where, f.Action, dash(f.Saves), dash(f.ReadAfter)})
		}
		p.Fixes = view(t, fixRows)
	}
	p.Settings = view(in.Visit.Settings, pageRows)
	p.Remedied = view(in.Visit.Remedied, pageRows)
	p.Prove = view(in.Visit.Prove, pageRows)
	tables := []Table{
		withTitle(in.Plan, "Full field sheet"),
		withTitle(in.Diagnosis, "Diagnosis"),
		withTitle(in.Readings, "Readings and residuals"),
	}
	if trim {
		p.Trims = view(in.Trim.Trims, pageRows)
		p.TrimAll = view(trimTable(in.Trim), pageRows)
		tables = tables[1:]
	}
	for _, t := range tables {
		p.Tables = append(p.Tables, view(t, pageRows))
	}
	data.Text = tx.list
	js, err := dataJSON(data)
	if err != nil {
		return nil, err
	}
	p.Data = template.JS(js)
	return p, nil
}

// dataJSON serialises the data block. encoding/json escapes <, >, &,
// U+2028 and U+2029, so the result cannot end the script element that
// holds it nor start markup, whatever the strings hold.
func dataJSON(d dataSet) ([]byte, error) {
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(true)
	if err := enc.Encode(d); err != nil {
		return nil, fmt.Errorf("report: encode charts: %w", err)
	}
	return bytes.TrimSpace(buf.Bytes()), nil
}

func withTitle(t Table, def string) Table {
	if t.Title == "" {
		t.Title = def
	}
	return t
}

// fnum formats a number for text; NaN is a dash.
func fnum(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "—"
	}
	return strconv.FormatFloat(sig(v), 'f', -1, 64)
}

func dash(s string) string {
	if s == "" {
		return "—"
	}
	return s
}

// maxPageHead is the longest printed page header, in characters.
const maxPageHead = 80

// pageHead reduces s to letters, digits, spaces and a few harmless marks
// for the printed page header, which lives in the style sheet: nothing
// there can then open a URL, a comment or a rule, whatever the site name
// holds (html/template escapes it as well).
func pageHead(s string) string {
	var b strings.Builder
	n := 0
	for _, r := range s {
		if n == maxPageHead {
			b.WriteString("…")
			break
		}
		switch {
		case unicode.IsLetter(r), unicode.IsDigit(r), r == ' ', r == '-', r == '.', r == ',', r == ':', r == '·', r == '_':
			b.WriteRune(r)
			n++
		}
	}
	return b.String()
}
