package cli

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"

	"flowset/internal/balance"
	"flowset/internal/hydraulics"
)

// TestDemoConsole runs the demo as a new user would and reads its console
// output as a technician would: the order of work, each message once, no
// cut cells, no statistician's words, and the branch counts of the
// console, the field sheet and the report the same.
func TestDemoConsole(t *testing.T) {
	out := filepath.Join(t.TempDir(), "out")
	code, stdout, stderr := run(t, "demo", "--out", out)
	if code != ExitOK {
		t.Fatalf("demo: exit %d\n%s", code, stderr)
	}
	// The steps in their order.
	last := -1
	for _, step := range []string{"1. Before you start", "2. Fix first", "3. Pump", "4. Valve settings, in adjustment order", "5. Prove it"} {
		i := strings.Index(stdout, step)
		if i < 0 || i < last {
			t.Errorf("step %q missing or out of order", step)
		}
		last = i
	}
	// Each message once.
	seen := map[string]bool{}
	for _, line := range strings.Split(stdout+stderr, "\n") {
		l := strings.TrimSpace(line)
		if len(l) < 30 || strings.HasPrefix(l, "#") { // table headers repeat by design
			continue
		}
		if seen[l] {
			t.Errorf("line printed twice: %q", l)
		}
		seen[l] = true
	}
	for _, bad := range []string{"~", "chi-square", "posterior", "sd of ln", "reduced "} {
		if strings.Contains(stdout, bad) {
			t.Errorf("console says %q", bad)
		}
	}
	// Plain words: the fault with its action, what it saves, what to read.
	if !regexp.MustCompile(`Saves: pump differential [0-9.]+ kPa → [0-9.]+ kPa`).MatchString(strings.Join(strings.Fields(stdout), " ")) {
		t.Errorf("console does not say what cleaning saves in kPa")
	}
	for _, want := range []string{"AHU-2: clean the strainer", "Saves: pump differential ", "Read after: before touching any balancing valve",
		"Energy: pump power 2.69 kW → 2.25 kW", "the fit explains it: RAD-2F"} {
		if !strings.Contains(strings.Join(strings.Fields(stdout+stderr), " "), want) {
			t.Errorf("console does not say %q", want)
		}
	}
	// One count everywhere: 14 branches, risers included.
	if !strings.Contains(stdout, "0 of 14 as found, 14 of 14 after the plan") {
		t.Errorf("console count of branches in tolerance is not 0 of 14 -> 14 of 14")
	}
	rows := readCSV(t, filepath.Join(out, "field-sheet.csv"))
	if len(rows)-1 != 14 {
		t.Errorf("field sheet has %d rows, want 14", len(rows)-1)
	}
	for _, w := range fieldSheetWriteIn {
		if !strings.Contains(strings.Join(rows[0], ","), w) {
			t.Errorf("field sheet has no write-in column %q", w)
		}
	}
	html, err := os.ReadFile(filepath.Join(out, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	page := string(html)
	if !regexp.MustCompile(`Branches in tolerance \([^)]*\)</td><td>0</td><td>14</td>`).MatchString(page) {
		t.Errorf("report summary does not count 0 -> 14 branches in tolerance")
	}
	if a, b := strings.Index(page, `id="settings"`), strings.Index(page, `class="appendix"`); a < 0 || b < 0 || a > b {
		t.Errorf("valve settings do not come before the appendix")
	}
	// The action pages speak plainly; the statistics stay in the appendix.
	if i := strings.Index(page, `class="appendix"`); i > 0 {
		first := page[strings.Index(page, "<body>"):i]
		for _, bad := range []string{"sd of ln", "chi-square", "posterior", "Source differential", "least with exact"} {
			if strings.Contains(first, bad) {
				t.Errorf("the report's action pages say %q", bad)
			}
		}
		if !strings.Contains(page[i:], "chi-square") && !strings.Contains(page[i:], "posterior") {
			t.Errorf("the appendix lost the fit's statistics")
		}
	}
}

// TestShortPlanSaysSoFirst checks that a plan that cannot meet its targets
// says so before anything else, claims no saving and exits ExitShort.
func TestShortPlanSaysSoFirst(t *testing.T) {
	out := filepath.Join(t.TempDir(), "out")
	// Twice the design flows: the pump would need four times the
	// differential (square law), far beyond it at full speed.
	code, stdout, stderr := run(t, "run", surveyDir("demo"), "--out", out, "--scale", "2")
	if code != ExitShort {
		t.Fatalf("run at twice design: exit %d, want %d\n%s\n%s", code, ExitShort, stdout, stderr)
	}
	if !strings.HasPrefix(stdout, "THIS PLAN CANNOT MEET ITS TARGETS") {
		t.Errorf("the shortfall is not the first thing said:\n%s", stdout)
	}
	flat := strings.Join(strings.Fields(stdout), " ")
	for _, want := range []string{"Short after the plan: ", "Why: every target needs ", "Cause: the pump gives ", "No energy saving is claimed"} {
		if !strings.Contains(flat, want) {
			t.Errorf("console does not say %q", want)
		}
	}
	// The shortfall in numbers: twice the flows need about four times the
	// differential (square law), far above what full speed gives.
	why := regexp.MustCompile(`Why: every target needs ([0-9.]+) kPa at the pump at [0-9.]+ l/s; at full speed \(100\.0 %\) it gives ([0-9.]+) kPa`).FindStringSubmatch(flat)
	if why == nil {
		t.Errorf("console does not state the shortfall in numbers:\n%s", flat)
	} else if need, have := mustFloat(t, why[1]), mustFloat(t, why[2]); need < 3*have {
		t.Errorf("shortfall: need %g kPa, have %g kPa; want the need far above what the pump gives", need, have)
	}
	if strings.Contains(stdout, "Energy:") || strings.Contains(stdout, "saved") {
		t.Errorf("a short plan claims a saving:\n%s", stdout)
	}
	html, err := os.ReadFile(filepath.Join(out, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	page := string(html)
	if a, b := strings.Index(page, `id="short"`), strings.Index(page, `id="before"`); a < 0 || a > b {
		t.Errorf("report does not show the shortfall above the steps")
	}
	if strings.Contains(page, "Annual energy saving") {
		t.Errorf("report of a short plan claims a saving")
	}
}

// TestUnitsUS runs the demo in US units: every output but JSON in gpm and
// psi, JSON still SI.
func TestUnitsUS(t *testing.T) {
	out := filepath.Join(t.TempDir(), "out")
	code, stdout, stderr := run(t, "run", surveyDir("demo"), "--out", out, "--units", "us")
	if code != ExitOK {
		t.Fatalf("exit %d\n%s", code, stderr)
	}
	if !strings.Contains(stdout, "gpm") || !strings.Contains(stdout, "psi") || strings.Contains(stdout, "l/s") || strings.Contains(stdout, "kPa") {
		t.Errorf("console not in gpm and psi:\n%s", stdout)
	}
	sheet, err := os.ReadFile(filepath.Join(out, "field-sheet.csv"))
	if err != nil {
		t.Fatal(err)
	}
	head := strings.SplitN(string(sheet), "\n", 2)[0]
	if !strings.Contains(head, "(gpm)") || !strings.Contains(head, "(psi)") || strings.Contains(head, "(l/s)") {
		t.Errorf("field sheet header not in gpm and psi: %s", head)
	}
	// AHU-1's target 1.6 l/s is 25.36 gpm (NIST SP 811: 1 gal/min =
	// 6.309020E-05 m3/s).
	if !strings.Contains(string(sheet), ",25.36,") {
		t.Errorf("field sheet has no 25.36 gpm target for AHU-1")
	}
	js, err := os.ReadFile(filepath.Join(out, "plan.json"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(js), `"total_flow_m3_s"`) {
		t.Errorf("plan.json is not in SI with the unit in its keys")
	}
	if code, _, _ := run(t, "plan", surveyDir("demo"), "--units", "imperial"); code != ExitUsage {
		t.Errorf("--units imperial: exit %d, want %d", code, ExitUsage)
	}
}

func TestJSONOnStdout(t *testing.T) {
	for _, tc := range []struct {
		cmd  string
		keys []string
	}{
		{"fit", []string{"branches", "readings"}},
		{"plan", []string{"least_differential_pa", "branches"}},
		{"run", []string{"calibration", "plan"}},
	} {
		args := []string{tc.cmd, surveyDir("demo"), "--json"}
		if tc.cmd == "run" {
			args = append(args, "--out", filepath.Join(t.TempDir(), "out"))
		}
		code, stdout, stderr := run(t, args...)
		if code != ExitOK {
			t.Fatalf("%s --json: exit %d\n%s", tc.cmd, code, stderr)
		}
		var v map[string]any
		if err := json.Unmarshal([]byte(stdout), &v); err != nil {
			t.Fatalf("%s --json: stdout is not one JSON document: %v\n%s", tc.cmd, err, stdout)
		}
		for _, k := range tc.keys {
			if _, ok := v[k]; !ok {
				t.Errorf("%s --json: no key %q", tc.cmd, k)
			}
		}
	}
}

func TestQuiet(t *testing.T) {
	code, stdout, _ := run(t, "run", surveyDir("demo"), "--out", filepath.Join(t.TempDir(), "out"), "--quiet")
	if code != ExitOK || stdout != "" {
		t.Errorf("run --quiet: exit %d, stdout %q; want 0 and nothing", code, stdout)
	}
}

func TestCommandLineHelp(t *testing.T) {
	code, stdout, _ := run(t, "help", "pipes")
	if code != ExitOK {
		t.Fatalf("help pipes: exit %d", code)
	}
	for _, s := range hydraulics.Standards() {
		if !strings.Contains(stdout, "\n"+s+": ") {
			t.Errorf("help pipes does not list %s", s)
		}
	}
	// Every size example the topic gives is accepted by its catalogue.
	for _, ex := range []struct{ std, size string }{
		{"sch40", "DN50"}, {"sch40", "dn 50"}, {"sch40", "2"}, {"sch40", "2in"}, {"sch40", "NPS 2"},
		{"sch40", "1-1/4"}, {"sch40", "1 1/4"}, {"sch40", "1.25"}, {"en1057", "22x1.0"}, {"en1057", "22 x 1"}, {"pe100-sdr11", "32mm"},
	} {
		if !strings.Contains(stdout, `"`+ex.size+`"`) {
			t.Errorf("help pipes does not give the example %q", ex.size)
		}
		if _, err := hydraulics.LookupPipe(ex.std, ex.size); err != nil {
			t.Errorf("help pipes example %s %q is refused: %v", ex.std, ex.size, err)
		}
	}
	for _, sh := range []string{"bash", "zsh", "fish", "powershell"} {
		code, stdout, _ := run(t, "completion", sh)
		if code != ExitOK || !strings.Contains(stdout, "flowset") {
			t.Errorf("completion %s: exit %d, %d bytes", sh, code, len(stdout))
		}
	}
	if code, _, _ := run(t, "completion", "tcsh"); code != ExitUsage {
		t.Errorf("completion tcsh: exit %d, want %d", code, ExitUsage)
	}
	code, stdout, _ = run(t, "--version")
	if code != ExitOK || !strings.HasPrefix(stdout, "flowset "+Version) {
		t.Errorf("--version: exit %d, %q", code, stdout)
	}
	code, _, stderr := run(t, "plan")
	if code != ExitUsage || !strings.Contains(stderr, "usage: flowset plan SITE") {
		t.Errorf("plan without SITE: exit %d, %q; want 2 and the usage line", code, stderr)
	}
}

// TestDisplayUS checks the US display's conversions against published
// factors.
func TestDisplayUS(t *testing.T) {
	u, err := displayUnits("us")
	if err != nil {
		t.Fatal(err)
	}
	// IEC 60534-1 (and ISA-75.01.01): Kv = 0.865 Cv, so Cv/Kv = 1.156.
	if got := u.cvPerKv(); math.Abs(got-1/0.865) > 0.001 {
		t.Errorf("Cv per Kv = %.5f, want 1.156 (IEC 60534-1: Kv = 0.865 Cv)", got)
	}
	// NIST SP 811 B.9: t/°F = 1.8 t/°C + 32; 70 °C = 158 °F.
	if got := u.temperature(343.15); got != "158.0 °F" {
		t.Errorf("temperature(343.15 K) = %q, want 158.0 °F", got)
	}
	// NIST SP 811 B.8: 1 psi = 6.894757 kPa.
	if got := u.diffNum(6894.757); got != "1.00" {
		t.Errorf("diffNum(6894.757 Pa) = %q, want 1.00 psi", got)
	}
}

func mustFloat(t *testing.T, s string) float64 {
	t.Helper()
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// TestBlankTemplatePassesCheck: a sheet with a header and no rows is a
// sheet not filled in yet, so the blank template passes check; one filled
// row makes it a site that is checked in full.
func TestBlankTemplatePassesCheck(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "site")
	if code, _, errs := run(t, "template", dir); code != ExitOK {
		t.Fatalf("template: exit %d: %s", code, errs)
	}
	code, stdout, stderr := run(t, "check", dir)
	if code != ExitOK || !strings.Contains(stdout, "a blank site") {
		t.Errorf("check of a blank template: exit %d\n%s%s", code, stdout, stderr)
	}
	f, err := os.OpenFile(filepath.Join(dir, "branches.csv"), os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := f.WriteString("A-1,,0.5\n"); err != nil {
		t.Fatal(err)
	}
	f.Close()
	if code, _, _ := run(t, "check", dir); code != ExitData {
		t.Errorf("check of a half-filled template: exit %d, want %d", code, ExitData)
	}
}

// TestSiteUnitsKey: the site's "units" key picks the display units unless
// --units is given; a short plan's outputs stay written even in a folder
// whose parents the run made.
func TestSiteUnitsKey(t *testing.T) {
	dir := t.TempDir()
	copySite(t, "demo", dir)
	appendLine(t, filepath.Join(dir, "site.csv"), "units,us")
	_, stdout, stderr := run(t, "plan", dir)
	// Readings are quoted as read; the results are in the display units.
	if !strings.Contains(stdout, "Flow (gpm)") || strings.Contains(stdout, "Flow (l/s)") {
		t.Errorf("plan of a site with units us is not in gpm:\n%s%s", stdout, stderr)
	}
	_, stdout, _ = run(t, "plan", dir, "--units", "si")
	if !strings.Contains(stdout, "Flow (l/s)") || strings.Contains(stdout, "gpm") {
		t.Errorf("--units si does not override the site's key")
	}
	out := filepath.Join(t.TempDir(), "new", "parent", "out")
	code, _, stderr := run(t, "run", dir, "--out", out, "--scale", "2")
	if code != ExitShort {
		t.Fatalf("run --scale 2: exit %d, want %d\n%s", code, ExitShort, stderr)
	}
	if _, err := os.Stat(filepath.Join(out, "report.html")); err != nil {
		t.Errorf("a short plan's report is not left written: %v", err)
	}
}

// TestUnitsM3h: the si-m3h display gives flows in m3/h (1.6 l/s = 5.76
// m3/h exactly) and differentials in kPa.
func TestUnitsM3h(t *testing.T) {
	code, stdout, stderr := run(t, "plan", surveyDir("demo"), "--units", "si-m3h")
	if code != ExitOK {
		t.Fatalf("exit %d\n%s", code, stderr)
	}
	flat := strings.Join(strings.Fields(stdout), " ")
	if !strings.Contains(flat, "Flow (m3/h)") || !strings.Contains(flat, " 5.76 ") {
		t.Errorf("plan --units si-m3h does not give AHU-1's 1.6 l/s as 5.76 m3/h:\n%s", stdout)
	}
}

// TestPlanNotesGrouped: the plan's one-a-branch warnings on branches read
// as restricted only through their own valves are one line on a large
// site, and stay one a branch on a small one.
func TestPlanNotesGrouped(t *testing.T) {
	note := func(id string, r float64) string {
		return fmt.Sprintf("%s reads as %.2g times its design resistance, but only through its own valve's test points: its setting is planned at design until a flow read another way (clamp-on) confirms it; if confirmed, re-plan with that reading", id, r)
	}
	for _, tc := range []struct {
		name  string
		n     int
		lines int
		want  string
	}{
		{"small site", 3, 5, "B2 reads as 2.5 times its design resistance"},
		{"large site", 109, 3, "109 branches read as well above their design resistance, but only through their own valves' test points: B0 (2.5 times), B1 (2.5 times), B2 (2.5 times), B3 (2.5 times), B4 (2.5 times), B5 (2.5 times), B6 (2.5 times), B7 (2.5 times) and 101 more;"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ws := []string{"design first: every other branch is set for its target"}
			for i := range tc.n {
				ws = append(ws, note(fmt.Sprintf("B%d", i), 2.5))
			}
			ws = append(ws, "the index circuit B9 is planned 1.5 % above its target")
			j := &job{Plan: &balance.Plan{Warnings: ws, Least: 1, LeastHigh: math.NaN()}}
			got := j.planNotes()
			if len(got) != tc.lines {
				t.Errorf("%d notes, want %d: %q", len(got), tc.lines, got)
			}
			if !slices.ContainsFunc(got, func(s string) bool { return strings.Contains(s, tc.want) }) {
				t.Errorf("no note holds %q: %q", tc.want, got)
			}
			if got[0] != ws[0] || got[len(got)-1] != ws[len(ws)-1] {
				t.Errorf("the other notes moved: %q", got)
			}
		})
	}
}

// TestCountOf: counts in the outputs agree with their noun ("1 valve",
// "3 valves"), not "valve(s)".
func TestCountOf(t *testing.T) {
	for _, c := range []struct {
		n          int
		noun, want string
	}{{0, "valve", "0 valves"}, {1, "valve", "1 valve"}, {2, "survey state", "2 survey states"}, {33, "reading", "33 readings"}} {
		if got := countOf(c.n, c.noun); got != c.want {
			t.Errorf("countOf(%d, %q) = %q, want %q", c.n, c.noun, got, c.want)
		}
	}
}
