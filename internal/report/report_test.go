package report

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"html"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"flowset/internal/cpuclock"

	"github.com/google/go-cmp/cmp"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata")

// hostile are strings that break out of, or inject into, HTML, a script
// block, JSON, go-echarts' raw-JS marker or echarts' HTML tooltips.
var hostile = []string{
	"</script><script>alert(1)</script>",
	"<!--<script>",
	"__f__alert(1)__f__",
	`"__f__function(){alert(2)}__f__"`,
	"<img src=x onerror=alert(3)>",
	`" onmouseover="alert(4)`,
	`' onfocus='alert(5)`,
	`\"); alert(6); ("\\`,
	"]]><svg onload=alert(7)>",
	"line\u2028sep\u2029para",
	"{b}{c}{a|rich}",
	"javascript:alert(8)",
	"<a href=\"https://example.invalid/x\">link</a>",
	"<style>@import url(https://example.invalid/x.css)</style>",
}

// hostileText joins every hostile string, so that each field gets them all.
var hostileText = strings.Join(hostile, " ")

// hostileInput is sampleInput with every string in it, at any depth,
// replaced by hostileText with a distinct number in front.
func hostileInput() Input { return makeHostile(sampleInput()) }

// hostileLarge is siteInput of 150 branches (the large-site form: finder,
// paged tables, stored data) made hostile in the same way.
func hostileLarge() Input { return makeHostile(siteInput(150)) }

// makeHostile replaces every string in in, at any depth, by hostileText with a
// distinct number in front.
func makeHostile(in Input) Input {
	in.Cautions = []string{"caution"}
	n := 0
	var walk func(v reflect.Value)
	walk = func(v reflect.Value) {
		switch v.Kind() {
		case reflect.String:
			n++
			v.SetString(fmt.Sprintf("%d %s", n, hostileText))
		case reflect.Struct:
			for i := range v.NumField() {
				walk(v.Field(i))
			}
		case reflect.Slice:
			for i := range v.Len() {
				walk(v.Index(i))
			}
		}
	}
	walk(reflect.ValueOf(&in).Elem())
	// Flags make the branch appear in the flagged series too.
	in.Branches[0].Flags = []string{"0 " + hostileText}
	return in
}

func render(t testing.TB, in Input) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := Write(&buf, in); err != nil {
		t.Fatalf("Write: %v", err)
	}
	return buf.Bytes()
}

// withoutECharts replaces the inlined library, which is not ours to pin,
// with placeholder.
func withoutECharts(t testing.TB, out []byte, placeholder string) []byte {
	t.Helper()
	if bytes.Count(out, []byte(echartsJS)) != 1 {
		t.Fatalf("output does not hold the echarts library exactly once")
	}
	return bytes.Replace(out, []byte(echartsJS), []byte(placeholder), 1)
}

func TestWriteGolden(t *testing.T) {
	got := withoutECharts(t, render(t, sampleInput()), "/* echarts.min.js "+EChartsVersion+" omitted */")
	path := filepath.Join("testdata", "report.golden")
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test ./internal/report -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("Write(sampleInput) differs from %s (-want +got):\n%s", path, cmp.Diff(string(want), string(got)))
	}
}

// TestWriteTrimGolden pins the round after setting's report.
func TestWriteTrimGolden(t *testing.T) {
	got := withoutECharts(t, render(t, trimInput()), "/* echarts.min.js "+EChartsVersion+" omitted */")
	path := filepath.Join("testdata", "trim.golden")
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test ./internal/report -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("Write(trimInput) differs from %s (-want +got):\n%s", path, cmp.Diff(string(want), string(got)))
	}
}

func TestWriteDeterministic(t *testing.T) {
	for _, tc := range []struct {
		name string
		in   func() Input
	}{
		{"sample", sampleInput},
		{"hostile", hostileInput},
		{"300 branches", func() Input { return bigInput(300) }},
	} {
		t.Run(tc.name, func(t *testing.T) {
			a, b := render(t, tc.in()), render(t, tc.in())
			if !bytes.Equal(a, b) {
				t.Errorf("two Writes of the same Input differ (%d and %d bytes)", len(a), len(b))
			}
		})
	}
}

var scriptBlock = regexp.MustCompile(`(?is)<script\b([^>]*)>(.*?)</script\s*>`)

// pageParts splits a report into its script blocks and the markup around
// them, and checks that the scripts are exactly the three the page has.
func pageParts(t *testing.T, out []byte) (markup string, data []byte) {
	t.Helper()
	// The library is checked whole and then set aside: it is large, and
	// none of it comes from the Input.
	const lib = "/* echarts */"
	s := string(withoutECharts(t, out, lib))
	m := scriptBlock.FindAllStringSubmatch(s, -1)
	if len(m) != 3 {
		t.Fatalf("page has %d script blocks, want 3 (echarts, data, drawing code)", len(m))
	}
	if !strings.HasSuffix(strings.TrimSpace(m[0][2]), lib) {
		t.Errorf("first script block is not the echarts library")
	}
	if m[1][1] != ` type="application/json" id="fs-data"` {
		t.Errorf("second script block has attributes %q, want the JSON data block", m[1][1])
	}
	if strings.TrimSpace(m[2][2]) != strings.TrimSpace(reportJS) {
		t.Errorf("third script block is not the constant drawing code")
	}
	if n := strings.Count(strings.ToLower(s), "<script"); n != 3 {
		t.Errorf("page has %d '<script' openings, want 3", n)
	}
	return scriptBlock.ReplaceAllString(s, "<script></script>"), []byte(m[1][2])
}

// In the markup outside scripts, text has every < escaped, so these find
// the real tags and what is inside them.
var (
	tag        = regexp.MustCompile(`<([A-Za-z][A-Za-z0-9-]*)([^>]*)>`)
	eventAttr  = regexp.MustCompile(`(?i)\son[a-z]+\s*=`)
	urlAttr    = regexp.MustCompile(`(?i)\b(src|href|action|formaction|poster|srcset|background|xlink:href)\s*=\s*["']?([^"'\s>]*)`)
	styleBlock = regexp.MustCompile(`(?is)<style>(.*?)</style>`)
)

// allowedTags are the elements the page template writes.
var allowedTags = map[string]bool{
	"html": true, "head": true, "meta": true, "title": true, "style": true, "script": true,
	"body": true, "main": true, "header": true, "footer": true, "section": true,
	"h1": true, "h2": true, "h3": true, "p": true, "dl": true, "dt": true, "dd": true,
	"ul": true, "li": true, "div": true, "span": true, "figure": true, "figcaption": true,
	"table": true, "thead": true, "tbody": true, "tr": true, "th": true, "td": true,
	"svg": true, "line": true, "rect": true, "circle": true,
	"details": true, "summary": true, "pre": true,
	// the large site's branch finder and pagers
	"label": true, "input": true, "select": true, "option": true, "button": true,
}

// checkPage checks the structure that makes a report safe and offline.
func checkPage(t *testing.T, out []byte) {
	t.Helper()
	markup, data := pageParts(t, out)
	for _, m := range tag.FindAllStringSubmatch(markup, -1) {
		if !allowedTags[strings.ToLower(m[1])] {
			t.Errorf("page markup has a <%s> element", m[1])
		}
		if a := eventAttr.FindString(m[2]); a != "" {
			t.Errorf("page markup has an event handler attribute: %q", m[0])
		}
		for _, u := range urlAttr.FindAllStringSubmatch(m[2], -1) {
			if u[2] != "" && !strings.HasPrefix(u[2], "#") {
				t.Errorf("page markup refers to %q in %s=", u[2], u[1])
			}
		}
	}
	styles := styleBlock.FindAllStringSubmatch(markup, -1)
	if len(styles) != 1 {
		t.Errorf("page has %d style blocks, want 1", len(styles))
	}
	for _, st := range styles {
		if strings.Contains(st[1], "@import") || strings.Contains(st[1], "url(") {
			t.Errorf("page style loads something")
		}
	}
	// The data block is JSON that cannot end its script element nor open
	// markup, and every string in it went through Clean.
	if bytes.ContainsAny(data, "<>&\u2028\u2029") {
		t.Errorf("data block holds an unescaped <, >, &, U+2028 or U+2029")
	}
	var v any
	if err := json.Unmarshal(data, &v); err != nil {
		t.Fatalf("data block is not JSON: %v", err)
	}
	var walk func(v any)
	walk = func(v any) {
		switch v := v.(type) {
		case string:
			checkClean(t, v, v)
		case []any:
			for _, e := range v {
				walk(e)
			}
		case map[string]any:
			for k, e := range v {
				checkClean(t, k, k)
				walk(e)
			}
		}
	}
	walk(v)
}

func TestWriteSafeAndOffline(t *testing.T) {
	for _, tc := range []struct {
		name string
		in   Input
	}{
		{"sample", sampleInput()},
		{"hostile names", hostileInput()},
		{"1000 branches", bigInput(1000)},
		{"trim", trimInput()},
		{"trim, hostile names", makeHostile(trimInput())},
		{"trim, 300 branches", withTrim(siteInput(300))},
	} {
		t.Run(tc.name, func(t *testing.T) {
			checkPage(t, render(t, tc.in))
		})
	}
}

// FuzzWrite puts arbitrary text into the fields that reach the charts and
// the page, and checks the page stays safe.
func FuzzWrite(f *testing.F) {
	for _, s := range hostile {
		f.Add(s, s, s)
	}
	f.Fuzz(func(t *testing.T, id, flag, label string) {
		in := sampleInput()
		in.Site, in.FlowUnit = label, id
		in.Branches[0].ID, in.Branches[1].ID = id, label
		in.Branches[2].Flags = []string{flag, id}
		in.Branches[3].Measured[0].Label = label
		in.Branches[4].ValveUnit, in.Branches[4].SettingPlanned = flag, label
		in.Plan.Rows[0][1] = id
		checkPage(t, render(t, in))
	})
}

func ExampleWrite() {
	in := Input{
		Site: "Example circuit", FlowUnit: "l/s", PressureUnit: "kPa", ToleranceLow: -10, ToleranceHigh: 10,
		Branches: []Branch{{ID: "B1", Design: 0.5, Before: 0.6, After: 0.5}},
	}
	var buf bytes.Buffer
	if err := Write(&buf, in); err != nil {
		fmt.Println(err)
		return
	}
	first, _, _ := strings.Cut(buf.String(), "\n")
	fmt.Println(first)
	// Output: <!DOCTYPE html>
}

func TestHostileTextIsShownEscaped(t *testing.T) {
	out := string(render(t, hostileInput()))
	markup := scriptBlock.ReplaceAllString(out, "")
	// html/template escapes text: the site name appears, harmless.
	if !strings.Contains(markup, "&lt;/script&gt;&lt;script&gt;alert(1)&lt;/script&gt;") {
		t.Errorf("escaped hostile text not found in the page markup")
	}
	// A chart title got the hostile text through Clean and JSON.
	if !strings.Contains(out, `\u003c\u200b/script\u003e`) && !strings.Contains(out, "\\u003c\u200b/script\\u003e") {
		t.Errorf("cleaned hostile text not found in the chart data")
	}
}

func TestWriteInvalid(t *testing.T) {
	tests := []struct {
		name   string
		change func(in *Input)
	}{
		{"infinite design flow", func(in *Input) { in.Branches[1].Design = math.Inf(1) }},
		{"infinite curve point", func(in *Input) { in.Branches[0].FitHigh[3].Y = math.Inf(-1) }},
		{"infinite reading error", func(in *Input) { in.Branches[2].Measured[0].YErr = math.Inf(1) }},
		{"infinite operating point", func(in *Input) { in.Combined.OpAfter.X = math.Inf(1) }},
		{"infinite tolerance", func(in *Input) { in.ToleranceHigh = math.Inf(1) }},
		{"tolerance reversed", func(in *Input) { in.ToleranceLow, in.ToleranceHigh = 10, -10 }},
		{"ragged plan row", func(in *Input) { in.Plan.Rows[1] = in.Plan.Rows[1][:2] }},
		{"infinite flow as left", func(in *Input) { *in = withTrim(*in); in.Trim.Branches[2].LeftHigh = math.Inf(1) }},
		{"ragged trims row", func(in *Input) { *in = withTrim(*in); in.Trim.Trims.Rows[0] = in.Trim.Trims.Rows[0][:3] }},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			in := sampleInput()
			tc.change(&in)
			var buf bytes.Buffer
			err := Write(&buf, in)
			if !errors.Is(err, ErrInvalid) {
				t.Fatalf("Write: error %v, want one wrapping ErrInvalid", err)
			}
			if buf.Len() != 0 {
				t.Errorf("Write wrote %d bytes with an invalid input", buf.Len())
			}
		})
	}
}

type failWriter struct{}

var errDiskFull = errors.New("disk full")

func (failWriter) Write([]byte) (int, error) { return 0, errDiskFull }

func TestWriteWriterError(t *testing.T) {
	if err := Write(failWriter{}, sampleInput()); !errors.Is(err, errDiskFull) {
		t.Errorf("Write to a failing writer: error %v, want one wrapping %v", err, errDiskFull)
	}
}

func TestWriteMissingValues(t *testing.T) {
	in := sampleInput()
	nan := math.NaN()
	in.Branches[0].Before = nan
	in.Branches[1].RatioFit, in.Branches[1].RatioLow = nan, nan
	in.Branches[2].AfterHigh = nan
	in.Branches[3].Design = 0
	in.Branches[4].Measured[0].XErr = nan
	in.Branches[4].FitLow[2].Y = nan
	in.Combined.OpBefore = XY{nan, nan}
	in.Summary.SpeedRatio = nan
	out := render(t, in)
	checkPage(t, out)
	if !bytes.Contains(out, []byte("<td>Pump speed, after ÷ as found</td><td></td><td>—</td>")) {
		t.Errorf("a NaN speed ratio is not shown as a dash")
	}
}

func TestWriteEmpty(t *testing.T) {
	out := render(t, Input{})
	checkPage(t, out)
	if n := bytes.Count(out, []byte(`<div class="chart"`)); n != 1 {
		t.Errorf("empty Input: %d charts, want 1 (the circuit chart)", n)
	}
}

func TestWriteDefaultCautions(t *testing.T) {
	in := sampleInput()
	in.Cautions = nil
	out := string(render(t, in))
	for _, want := range []string{"rotating machinery", "competent, authorised people", "Local codes"} {
		if !strings.Contains(out, want) {
			t.Errorf("default cautions: %q not in the page", want)
		}
	}
	in.Cautions = []string{"Only our own caution."}
	out = string(render(t, in))
	if strings.Contains(out, "rotating machinery") || !strings.Contains(out, "Only our own caution.") {
		t.Errorf("given cautions do not replace the default set")
	}
}

func TestPickBranches(t *testing.T) {
	// 30 branches: 3 flagged, the others sorted so that a larger index is
	// further from design; 24 charts leave room for 21 unflagged ones.
	bs := make([]Branch, 30)
	for i := range bs {
		bs[i] = Branch{ID: fmt.Sprint(i), Design: 1, Before: 1 + 0.01*float64(i)}
	}
	for _, i := range []int{0, 4, 8} {
		bs[i].Flags = []string{"flag"}
	}
	got := pickBranches(bs)
	want := []int{0, 4, 8}
	for i := 9; i < 30; i++ {
		want = append(want, i)
	}
	if diff := cmp.Diff(want, got); diff != "" {
		t.Errorf("pickBranches (-want +got):\n%s", diff)
	}
	if got := pickBranches(bs[:5]); !cmp.Equal(got, []int{0, 1, 2, 3, 4}) {
		t.Errorf("pickBranches of 5 = %v, want all", got)
	}
}

func TestWriteManyBranches(t *testing.T) {
	// Up to maxStaticBranches, every branch is on each category chart,
	// with a slider beyond maxWindow, and every table row is in the page.
	out := string(render(t, bigInput(60)))
	for _, want := range []string{"Showing 24 of 60 branches", "drag the slider", `"dataZoom":[{"type":"slider"`} {
		if !strings.Contains(out, want) {
			t.Errorf("60 branches: %q not in the page", want)
		}
	}
	if strings.Contains(out, `id="fs-find"`) || strings.Contains(out, `data-table="`) {
		t.Errorf("60 branches: the page has the large site's finder or paged tables")
	}
}

// TestWriteLargeSite: above maxStaticBranches the report holds every
// branch once, in the data block, and a page of each long table.
func TestWriteLargeSite(t *testing.T) {
	in := siteInput(1000)
	out := render(t, in)
	page := string(out)
	if n := strings.Count(page, `<div class="chart" id="fs-branch-`); n != maxSmall {
		t.Errorf("%d branch charts, want %d", n, maxSmall)
	}
	for _, want := range []string{"Showing 24 of 1,000 branches", `id="fs-find"`, "The first 40 of 1,000 rows", "The first 40 of 2,000 rows",
		"The whole table is in readings-file.csv beside this report", "every branch is in the-files.csv beside this report"} {
		if !strings.Contains(page, want) {
			t.Errorf("%q not in the page", want)
		}
	}
	if strings.Contains(string(withoutECharts(t, out, "")), `"dataZoom"`) {
		t.Errorf("a category chart of a large site has a slider: it should show a bounded set of branches")
	}

	var data struct {
		Text   []string `json:"text"`
		Finder struct {
			ID     []int      `json:"id"`
			Before []*float64 `json:"f0"`
			Flags  []int      `json:"fl"`
			Charts []int      `json:"charts"`
		} `json:"finder"`
		Tables []struct {
			N    int `json:"n"`
			Cols []struct {
				K *int     `json:"k"`
				G []int    `json:"g"`
				D []string `json:"d"`
				I []int    `json:"i"`
				V []string `json:"v"`
				P string   `json:"p"`
				N []*int64 `json:"n"`
				F int      `json:"f"`
			} `json:"c"`
		} `json:"tables"`
	}
	_, block := pageParts(t, out)
	if err := json.Unmarshal(block, &data); err != nil {
		t.Fatal(err)
	}
	// The finder: every branch, in input order, with its flag and its flow
	// as found in percent of design.
	if len(data.Finder.ID) != len(in.Branches) {
		t.Fatalf("finder holds %d branches, want %d", len(data.Finder.ID), len(in.Branches))
	}
	for i, b := range in.Branches {
		if got := data.Text[data.Finder.ID[i]]; got != b.ID {
			t.Errorf("finder branch %d is %q, want %q", i, got, b.ID)
		}
		if got, want := data.Text[data.Finder.Flags[i]], strings.Join(b.Flags, "; "); got != want {
			t.Errorf("finder flags of %s = %q, want %q", b.ID, got, want)
		}
		// Stored to 4 significant digits.
		if f, want := data.Finder.Before[i], 100*b.Before/b.Design; f == nil || math.Abs(*f-want) > 5e-4*want {
			t.Errorf("finder flow as found of %s = %v, want %.2f %% of design", b.ID, f, 100*b.Before/b.Design)
		}
	}
	if !cmp.Equal(data.Finder.Charts, pickBranches(in.Branches)) {
		t.Errorf("finder's charted branches %v, want %v", data.Finder.Charts, pickBranches(in.Branches))
	}
	// Each stored table reads back as the table given, whatever way each
	// column is stored.
	var fixes [][]string
	for _, f := range in.Visit.Fixes {
		fixes = append(fixes, []string{f.Where, f.Action, f.Saves, "—"})
	}
	want := [][][]string{fixes, in.Visit.Settings.Rows, in.Plan.Rows, in.Diagnosis.Rows, in.Readings.Rows}
	if len(data.Tables) != len(want) {
		t.Fatalf("%d stored tables, want %d (fixes, settings, plan, diagnosis, readings)", len(data.Tables), len(want))
	}
	for k, dt := range data.Tables {
		rows := make([][]string, dt.N)
		for r := range rows {
			for _, c := range dt.Cols {
				var v string
				switch {
				case c.K != nil:
					v = data.Text[*c.K]
				case c.G != nil:
					v = data.Text[c.G[r]]
				case c.D != nil:
					v = c.D[c.I[r]]
				case c.N != nil:
					if c.N[r] != nil {
						v = c.P + strconv.FormatFloat(float64(*c.N[r])/math.Pow(10, float64(c.F)), 'f', c.F, 64)
					}
				default:
					v = c.P + c.V[r]
				}
				rows[r] = append(rows[r], v)
			}
		}
		if diff := cmp.Diff(want[k], rows); diff != "" {
			t.Errorf("stored table %d (-given +read back):\n%.2000s", k, diff)
		}
	}
	// Stored once: a branch on no chart and in no table's first page is
	// named exactly once in the whole file.
	shown := map[string]bool{}
	for _, i := range pickN(in.Branches, maxWindow) {
		shown[in.Branches[i].ID] = true
	}
	for _, i := range pickBranches(in.Branches) {
		shown[in.Branches[i].ID] = true
	}
	for _, tb := range want {
		for _, r := range tb[:pageRows] {
			for _, c := range r {
				shown[c] = true
			}
		}
	}
	checked := 0
	for _, b := range in.Branches {
		if shown[b.ID] {
			continue
		}
		checked++
		if n := strings.Count(page, `"`+b.ID+`"`); n != 1 {
			t.Errorf("branch %s is named %d times in the page, want once", b.ID, n)
		}
	}
	if checked < 800 {
		t.Errorf("only %d branches checked for being stored once", checked)
	}
}

// TestWriteWarningsGrouped: warnings of one kind are counted, the first
// few shown with their lines, and the page says where the rest are.
func TestWriteWarningsGrouped(t *testing.T) {
	in := sampleInput()
	for i := range 1424 {
		in.Warnings = append(in.Warnings, Warning{Kind: "valve differential below 3 kPa reads unreliably",
			Text: fmt.Sprintf("readings.csv:%d:4: valve differential below 3 kPa reads unreliably", 10+i)})
		if i == 5 {
			in.Warnings = append(in.Warnings, Warning{Kind: "unknown column, ignored", Text: "branches.csv:1:9: unknown column, ignored"})
		}
	}
	in.WarningsWhere = "the check lists every one"
	page := string(render(t, in))
	for _, want := range []string{
		"Warnings from the check of the site’s sheets: 1,425",
		"<p>valve differential below 3 kPa reads unreliably: 1,424</p>",
		"readings.csv:10:4:", "readings.csv:12:4:",
		"<li>and 1,421 more: the check lists every one</li>",
		"<p>unknown column, ignored: 1</p>", "branches.csv:1:9",
	} {
		if !strings.Contains(page, want) {
			t.Errorf("%q not in the page", want)
		}
	}
	if strings.Contains(page, "readings.csv:13:4:") {
		t.Errorf("the fourth warning of a kind is listed")
	}
}

// bigInput is an invented circuit of n branches with a fixed seed.
func bigInput(n int) Input {
	rng := rand.New(rand.NewPCG(1, 2))
	in := sampleInput()
	in.Site = fmt.Sprintf("Invented example campus, %d branches", n)
	in.Branches = nil
	in.Plan.Rows, in.Readings.Rows = nil, nil
	for i := range n {
		design := 0.1 + 0.4*rng.Float64()
		ratio := 0.7 + 0.8*rng.Float64()
		before := design * (0.6 + 0.8*rng.Float64())
		kd := 20 / (design * design)
		q := 1.3 * math.Max(design, before)
		b := Branch{
			ID: fmt.Sprintf("B%04d", i+1), Design: design, Before: before,
			After: design * (0.95 + 0.1*rng.Float64()), RatioFit: ratio, RatioLow: 0.85 * ratio, RatioHigh: 1.15 * ratio,
			SettingNow: "3.0 turns", SettingPlanned: "2.5 turns", NowValue: 3, PlannedValue: 2 + 2*rng.Float64(), ValveUnit: "turns",
			DesignCurve: quad(kd, q, 9), FitCurve: quad(kd*ratio, q, 9), FitLow: quad(kd*ratio*0.85, q, 9), FitHigh: quad(kd*ratio*1.15, q, 9),
			Measured: []Point{{X: before, Y: kd * ratio * before * before, XErr: 0.05 * before, YErr: 0.8, Label: "survey 1"}},
		}
		b.AfterLow, b.AfterHigh = 0.93*b.After, 1.07*b.After
		if rng.IntN(20) == 0 {
			b.Flags = []string{"high resistance"}
		}
		in.Branches = append(in.Branches, b)
		in.Plan.Rows = append(in.Plan.Rows, []string{fmt.Sprint(i + 1), b.ID, b.SettingNow, b.SettingPlanned, fmt.Sprintf("%.2f", b.After)})
		in.Readings.Rows = append(in.Readings.Rows, []string{b.ID, "survey 1", "1 kPa", "1 kPa", "0 kPa"})
	}
	return in
}

// siteInput is bigInput with the tables a site of n branches has in the
// report: the settings in adjustment order (7 columns), the field sheet
// (11 columns), two readings per branch (10 columns) and a finding and a
// fix per flagged branch, as the command line fills them.
func siteInput(n int) Input {
	in := bigInput(n)
	in.Files = "the-files.csv"
	in.Readings.File = "readings-file.csv"
	in.Visit.Settings.Rows = nil
	in.Plan.Columns = []string{"Order", "Branch", "Valve", "As-found setting", "New setting", "Setting unit", "Predicted (% of target)",
		"Band low (% of target)", "Band high (% of target)", "In tolerance", "Notes"}
	in.Plan.Rows = nil
	in.Readings.Columns = []string{"source", "state", "at", "quantity", "instrument", "value", "model", "unit", "normalised residual", "note"}
	in.Readings.Rows = nil
	in.Diagnosis.Rows = nil
	in.Visit.Fixes = nil
	line := 2
	for i, b := range in.Branches {
		valve := fmt.Sprintf("V%d", 15+5*(i%4))
		now, set := fmt.Sprintf("%.2f", b.NowValue), fmt.Sprintf("%.2f", math.Round(10*b.PlannedValue)/10)
		in.Visit.Settings.Rows = append(in.Visit.Settings.Rows, []string{fmt.Sprint(i + 1), b.ID, valve, now + " turns", set + " turns",
			fmt.Sprintf("%.1f", 3+40*b.Design), fmt.Sprintf("%.3f", b.After)})
		p := 100 * b.After / b.Design
		in.Plan.Rows = append(in.Plan.Rows, []string{fmt.Sprint(i + 1), b.ID, valve, now, set, "turns", fmt.Sprintf("%.1f", p),
			fmt.Sprintf("%.1f", 0.97*p), fmt.Sprintf("%.1f", 1.03*p), "yes", ""})
		for k, q := range []string{"flow", "valve diff"} {
			v := b.Before
			if k == 1 {
				v = 20 * b.Before / b.Design
			}
			in.Readings.Rows = append(in.Readings.Rows, []string{fmt.Sprintf("site/readings.csv:%d", line), "as-found", b.ID, q, "valve-meter",
				fmt.Sprintf("%.3f", v), fmt.Sprintf("%.3f", 1.01*v), "l/s", fmt.Sprintf("%.2f", 0.3*float64(line%7-3)), ""})
			line++
		}
		if len(b.Flags) > 0 {
			in.Diagnosis.Rows = append(in.Diagnosis.Rows, []string{b.ID, "restricted", fmt.Sprintf("fitted resistance %.2f x design", b.RatioFit)})
			in.Visit.Fixes = append(in.Visit.Fixes, Fix{Where: b.ID, Action: fmt.Sprintf("clean the strainer (it passes water as if %.1f times its design resistance)", b.RatioFit),
				Saves: "pump differential 488.0 kPa → 427.0 kPa"})
		}
	}
	return in
}

// BenchmarkWrite writes the report of an invented site of n branches
// (siteInput) and reports its size.
func BenchmarkWrite(b *testing.B) {
	for _, n := range []int{15, 1000, 10000} {
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			in := siteInput(n)
			var buf bytes.Buffer
			b.ReportAllocs()
			cpu := cpuclock.Start()
			for b.Loop() {
				buf.Reset()
				if err := Write(&buf, in); err != nil {
					b.Fatal(err)
				}
			}
			cpu.Report(b)
			b.ReportMetric(float64(buf.Len()), "bytes/report")
		})
	}
}

// TestWriteTrim checks the round after setting's report: its pages replace
// the visit's, every branch is in its table with where its flow as left
// comes from, the chart shows the branches read and the worst (at most a
// window's worth), and a large round's table is stored whole and shown a
// page at a time.
func TestWriteTrim(t *testing.T) {
	t.Run("small", func(t *testing.T) {
		in := trimInput()
		markup, data := pageParts(t, render(t, in))
		for _, want := range []string{`id="proof"`, `id="trims"`, `id="left"`, "After setting, proof and trims", ", model<", ", read<", "As left (model)"} {
			if !strings.Contains(markup, want) {
				t.Errorf("page lacks %q", want)
			}
		}
		// The visit's steps and the plan's charts are not the round's.
		for _, not := range []string{`id="before"`, `id="settings"`, `id="handover"`, `id="combined"`, `id="flow"`, "Full field sheet"} {
			if strings.Contains(markup, not) {
				t.Errorf("page holds %q", not)
			}
		}
		for _, b := range in.Trim.Branches {
			if !strings.Contains(markup, html.EscapeString(b.ID)) && !strings.Contains(markup, strings.SplitN(b.ID, " ", 2)[1]) {
				t.Errorf("branch %q is not in the page", b.ID)
			}
		}
		var d struct {
			Charts []chart `json:"charts"`
		}
		if err := json.Unmarshal(data, &d); err != nil {
			t.Fatal(err)
		}
		if len(d.Charts) == 0 || d.Charts[0].ID != "fs-trim" {
			t.Fatalf("first chart is not the round's")
		}
		if n := len(d.Charts[0].Option["series"].([]any)); n != 5 {
			t.Errorf("round's chart has %d series, want 5 (as found, predicted, interval, as left read and not read)", n)
		}
	})
	t.Run("300 branches", func(t *testing.T) {
		in := withTrim(siteInput(300))
		bs := in.Trim.Branches
		pick := pickTrim(bs)
		if len(pick) != maxWindow {
			t.Fatalf("chart shows %d branches, want %d", len(pick), maxWindow)
		}
		shown := map[int]bool{}
		for _, i := range pick {
			shown[i] = true
		}
		// Every branch to act on is shown, and the rest are read ones
		// before any not read.
		read := 0
		for i, b := range bs {
			if (b.Trim != "" || b.Note != "") && !shown[i] {
				t.Errorf("branch %s to act on is not charted", b.ID)
			}
			if b.Read {
				read++
			}
		}
		for i, b := range bs {
			if shown[i] && !b.Read && b.Trim == "" && b.Note == "" && read > maxWindow {
				t.Errorf("branch %s, not read, charted before read ones", b.ID)
			}
		}
		out := render(t, in)
		markup, data := pageParts(t, out)
		if !strings.Contains(markup, "trim.csv beside this report") {
			t.Errorf("paged round's table does not name its file")
		}
		var d struct {
			Tables []struct {
				Rows int `json:"n"`
			} `json:"tables"`
		}
		if err := json.Unmarshal(data, &d); err != nil {
			t.Fatal(err)
		}
		found := false
		for _, tb := range d.Tables {
			found = found || tb.Rows == len(bs)
		}
		if !found {
			t.Errorf("no stored table holds the round's %d branches", len(bs))
		}
		if n := strings.Count(markup, "<tr>"); n > 400 {
			t.Errorf("page writes %d table rows; a large round should show a page at a time", n)
		}
	})
}
