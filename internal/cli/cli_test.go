package cli

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/csv"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"

	"flowset/internal/site"
	"flowset/surveys"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata")

// fixedClock is the clock injected into every test run, so outputs are
// byte-for-byte repeatable.
func fixedClock() time.Time { return time.Date(2026, 3, 14, 9, 30, 0, 0, time.UTC) }

// run executes flowset with args and returns its exit code and streams.
func run(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := RunIO(context.Background(), args, &IO{In: strings.NewReader(""), Out: &out, Err: &errb, Now: fixedClock})
	return code, out.String(), errb.String()
}

func surveyDir(name string) string { return filepath.Join("..", "..", "surveys", name) }

func golden(t *testing.T, name string, got string) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test ./internal/cli -update to create it)", err)
	}
	if d := cmp.Diff(string(want), got); d != "" {
		t.Errorf("output differs from %s (-want +got):\n%s", path, d)
	}
}

func TestCheckDemoGolden(t *testing.T) {
	code, out, errs := run(t, "check", surveyDir("demo"))
	if code != ExitOK {
		t.Fatalf("check demo: exit %d, stderr:\n%s", code, errs)
	}
	golden(t, "check-demo.golden", out)
}

func TestCurvesDemoGolden(t *testing.T) {
	code, out, errs := run(t, "curves", surveyDir("demo"))
	if code != ExitOK {
		t.Fatalf("curves demo: exit %d, stderr:\n%s", code, errs)
	}
	for i, line := range strings.Split(out, "\n") {
		if n := len([]rune(line)); n > 80 {
			t.Errorf("curves table line %d is %d columns wide, want at most 80: %q", i+1, n, line)
		}
	}
	golden(t, "curves-demo.golden", out)
	for _, f := range []string{"csv", "json"} {
		if code, _, errs := run(t, "curves", "--format", f, surveyDir("demo")); code != ExitOK {
			t.Errorf("curves --format %s: exit %d: %s", f, code, errs)
		}
	}
}

// checksums maps every file under dir to its SHA-256.
func checksums(t *testing.T, dir string) map[string][32]byte {
	t.Helper()
	out := map[string][32]byte{}
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		out[p] = sha256.Sum256(b)
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

var wantOutputs = []string{".flowset-output", "calibration.csv", "calibration.json", "field-sheet.csv", "field-sheet.xlsx", "findings.csv", "plan.json", "read-next.csv", "read-next.json", "readings.csv", "report.html"}

// TestRunEverySurvey runs the whole job on every site under surveys/ and
// checks that the outputs are all there and the inputs untouched.
func TestRunEverySurvey(t *testing.T) {
	for _, name := range surveys.Names() {
		t.Run(name, func(t *testing.T) {
			before := checksums(t, surveyDir(name))
			out := filepath.Join(t.TempDir(), "out")
			code, stdout, errs := run(t, "run", surveyDir(name), "--out", out)
			if code != ExitOK {
				t.Fatalf("run %s: exit %d, stderr:\n%s", name, code, errs)
			}
			if !strings.Contains(stdout, filepath.Join(out, "report.html")) {
				t.Errorf("run %s does not say where the report is:\n%s", name, stdout)
			}
			var got []string
			entries, err := os.ReadDir(out)
			if err != nil {
				t.Fatal(err)
			}
			for _, e := range entries {
				got = append(got, e.Name())
			}
			sort.Strings(got)
			if d := cmp.Diff(wantOutputs, got); d != "" {
				t.Errorf("run %s outputs (-want +got):\n%s", name, d)
			}
			if d := cmp.Diff(before, checksums(t, surveyDir(name))); d != "" {
				t.Errorf("run %s changed its inputs:\n%s", name, d)
			}
		})
	}
}

// TestRunDeterministic runs the demo twice with the same clock: every output
// must be identical byte for byte.
func TestRunDeterministic(t *testing.T) {
	a, b := filepath.Join(t.TempDir(), "a"), filepath.Join(t.TempDir(), "b")
	for _, d := range []string{a, b} {
		if code, _, errs := run(t, "demo", "--out", d, "--quiet"); code != ExitOK {
			t.Fatalf("demo: exit %d: %s", code, errs)
		}
	}
	for _, f := range wantOutputs {
		if f == "field-sheet.xlsx" {
			continue // the workbook library stamps zip times; its content is checked elsewhere
		}
		x, _ := os.ReadFile(filepath.Join(a, f))
		y, _ := os.ReadFile(filepath.Join(b, f))
		if !bytes.Equal(x, y) {
			t.Errorf("%s differs between two runs with the same inputs and clock", f)
		}
	}
}

// TestDemoReportDataGolden pins the demo report without the inlined charting
// library (not ours to pin): its data, tables and text.
func TestDemoReportDataGolden(t *testing.T) {
	out := filepath.Join(t.TempDir(), "demo")
	if code, _, errs := run(t, "demo", "--out", out, "--quiet"); code != ExitOK {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	html, err := os.ReadFile(filepath.Join(out, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	s := string(html)
	i := strings.Index(s, "<script>")
	j := strings.Index(s[i:], "</script>")
	if i < 0 || j < 0 || !strings.Contains(s[i:i+j], "echarts") {
		t.Fatal("report does not start with the inlined charting library")
	}
	golden(t, "demo-report.golden", s[:i]+"<script>/* charting library omitted */"+s[i+j:])
}

func TestOutputNotOverwritten(t *testing.T) {
	out := filepath.Join(t.TempDir(), "out")
	if err := os.Mkdir(out, 0o755); err != nil {
		t.Fatal(err)
	}
	keep := filepath.Join(out, "keep.txt")
	if err := os.WriteFile(keep, []byte("mine"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, errs := run(t, "demo", "--out", out, "--quiet")
	if code != ExitUsage || !strings.Contains(errs, "--force") {
		t.Fatalf("demo into an existing folder: exit %d, stderr %q; want exit 2 naming --force", code, errs)
	}
	// --force replaces only a folder flowset wrote: not this one.
	code, _, errs = run(t, "demo", "--out", out, "--quiet", "--force")
	if code != ExitUsage || !strings.Contains(errs, "was not written by flowset") {
		t.Fatalf("demo --force into a folder flowset did not write: exit %d, stderr %q; want exit 2", code, errs)
	}
	if b, err := os.ReadFile(keep); err != nil || string(b) != "mine" {
		t.Fatalf("existing output folder was touched: %v %q", err, b)
	}
	if err := os.RemoveAll(out); err != nil {
		t.Fatal(err)
	}
	if code, _, errs := run(t, "demo", "--out", out, "--quiet"); code != ExitOK {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	if err := os.Remove(filepath.Join(out, "findings.csv")); err != nil {
		t.Fatal(err)
	}
	if code, _, errs := run(t, "demo", "--out", out, "--quiet", "--force"); code != ExitOK {
		t.Fatalf("demo --force over its own output: exit %d: %s", code, errs)
	}
	if _, err := os.Stat(filepath.Join(out, "findings.csv")); err != nil {
		t.Errorf("--force: %v", err)
	}
	entries, _ := os.ReadDir(filepath.Dir(out))
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			t.Errorf("temporary %s left behind", e.Name())
		}
	}
}

func TestOutInsideInput(t *testing.T) {
	dir := t.TempDir()
	copySite(t, "demo", dir)
	code, _, errs := run(t, "run", dir, "--out", filepath.Join(dir, "out"))
	if code != ExitUsage || !strings.Contains(errs, "inside the input") {
		t.Fatalf("run with --out inside the input: exit %d, stderr %q; want exit 2", code, errs)
	}
}

func TestUsageErrors(t *testing.T) {
	for _, c := range []struct {
		name string
		args []string
		want string
	}{
		{"unknown command", []string{"balance-all"}, "unknown command"},
		{"unknown flag", []string{"check", "--frobnicate", "x"}, "unknown flag"},
		{"missing site", []string{"check"}, "takes 1 argument"},
		{"run without out", []string{"run", "x"}, "--out is required"},
		{"bad format", []string{"curves", "--format", "xml", "x"}, "--format"},
		{"bad rounding", []string{"plan", "--rounding", "up", "x"}, "--rounding"},
		{"bad scale", []string{"plan", "--scale", "7", "x"}, "--scale"},
		{"unknown demo site", []string{"demo", "--site", "nowhere"}, "built-in sites"},
	} {
		t.Run(c.name, func(t *testing.T) {
			code, _, errs := run(t, c.args...)
			if code != ExitUsage || !strings.Contains(errs, c.want) {
				t.Errorf("flowset %q: exit %d, stderr %q; want exit 2 mentioning %q", c.args, code, errs, c.want)
			}
		})
	}
}

func TestBadSiteExitsOne(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "blank")
	if code, _, errs := run(t, "template", dir); code != ExitOK {
		t.Fatalf("template: exit %d: %s", code, errs)
	}
	// A blank template passes check (see TestBlankTemplatePassesCheck);
	// a branch with nothing in it does not.
	appendLine(t, filepath.Join(dir, "branches.csv"), "A-1,,0.5")
	code, out, errs := run(t, "check", dir)
	if code != ExitData || !strings.Contains(out, "branches.csv:") || !strings.Contains(errs, "error(s)") {
		t.Fatalf("check of a site with an empty branch: exit %d, stderr %q; want exit 1 naming branches.csv", code, errs)
	}
}

// copySite writes a built-in site's sheets into dir.
func copySite(t *testing.T, name, dir string) {
	t.Helper()
	err := fs.WalkDir(surveys.FS, name, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := fs.ReadFile(surveys.FS, p)
		if err != nil {
			return err
		}
		return os.WriteFile(filepath.Join(dir, filepath.Base(p)), b, 0o644)
	})
	if err != nil {
		t.Fatal(err)
	}
}

// TestFormulaInjection gives branches names a spreadsheet would run as
// formulas and checks no output cell starts with a formula character
// (OWASP, "CSV Injection").
func TestFormulaInjection(t *testing.T) {
	s, probs, err := site.ReadDir(surveys.FS, "plantroom")
	if err != nil || probs.Err() != nil {
		t.Fatal(err, probs)
	}
	hostile := []string{"=HYPERLINK(\"http://x\",\"y\")", "+1+cmd|' /C calc'!A0", "-2+3", "@SUM(A1)"}
	rename := map[string]string{}
	for i := range s.Branches {
		if i < len(hostile) {
			rename[s.Branches[i].ID] = hostile[i]
			s.Branches[i].ID = hostile[i]
		}
	}
	for i := range s.Branches {
		if n, ok := rename[s.Branches[i].Parent]; ok {
			s.Branches[i].Parent = n
		}
	}
	for i := range s.Readings {
		if n, ok := rename[s.Readings[i].Where]; ok {
			s.Readings[i].Where = n
		}
	}
	dir := t.TempDir()
	err = site.WriteDir(s, func(name string) (io.WriteCloser, error) { return os.Create(filepath.Join(dir, name)) })
	if err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "out")
	if code, _, errs := run(t, "run", dir, "--out", out, "--quiet"); code != ExitOK {
		t.Fatalf("run with formula-like names: exit %d: %s", code, errs)
	}
	for _, f := range []string{"field-sheet.csv", "calibration.csv", "findings.csv", "readings.csv"} {
		b, err := os.ReadFile(filepath.Join(out, f))
		if err != nil {
			t.Fatal(err)
		}
		recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		seen := false
		for _, r := range recs {
			for _, c := range r {
				for _, h := range hostile {
					if strings.Contains(c, h) {
						seen = true
					}
				}
				if c != "" && strings.ContainsRune("=+@\t\r", rune(c[0])) {
					t.Errorf("%s: cell %q starts with a formula character", f, c)
				}
				if strings.HasPrefix(c, "-") && !isNumber(c) {
					t.Errorf("%s: cell %q starts with a formula character", f, c)
				}
			}
		}
		if f == "field-sheet.csv" && !seen {
			t.Errorf("%s: the hostile names do not appear at all; the test proves nothing", f)
		}
	}
}

func isNumber(s string) bool {
	var x float64
	_, err := fmt.Sscanf(s, "%g", &x)
	return err == nil && fmt.Sprint(x) != "" && !strings.ContainsAny(s, " +")
}

// TestCheckStatePump checks that the summary names the pump setting the
// states sheet gives a survey state (the site package's fixture: the
// after-change state's controller lowered to 55 kPa).
func TestCheckStatePump(t *testing.T) {
	code, out, errs := run(t, "check", filepath.Join("..", "site", "testdata", "small"))
	if code != ExitOK {
		t.Fatalf("check: exit %d, stderr:\n%s", code, errs)
	}
	for _, want := range []string{
		"  state as-found             8 readings\n",
		"  state after-change         3 readings, 1 valve set by the moves sheet, pump at set point 55 kPa\n",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("check output lacks %q:\n%s", want, out)
		}
	}
}

// TestRunSpeedReading checks that a drive's displayed speed goes through the
// whole job and comes out as a ratio to rated speed, not as a pressure.
func TestRunSpeedReading(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "site")
	if err := os.CopyFS(dir, os.DirFS(filepath.Join("..", "site", "testdata", "small"))); err != nil {
		t.Fatal(err)
	}
	f, err := os.OpenFile(filepath.Join(dir, "readings.csv"), os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := f.WriteString("as-found,pump,speed,92,%,,pump-display,,,10:42,\n"); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "out")
	if code, _, errs := run(t, "run", dir, "--out", out); code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d, stderr:\n%s", code, errs)
	}
	data, err := os.ReadFile(filepath.Join(out, "readings.csv"))
	if err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(bytes.NewReader(data)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, r := range rows {
		if len(r) > 7 && r[3] == "speed" {
			found = true
			if r[5] != "0.920" || r[7] != "ratio" {
				t.Errorf("speed row %q: want value 0.920 in unit ratio", r)
			}
		}
	}
	if !found {
		t.Errorf("no speed row in readings.csv:\n%s", data)
	}
}

// appendLine adds one line to the end of a sheet.
func appendLine(tb testing.TB, path, line string) {
	tb.Helper()
	f, err := os.OpenFile(path, os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		tb.Fatal(err)
	}
	if _, err := f.WriteString(line + "\n"); err != nil {
		f.Close()
		tb.Fatal(err)
	}
	if err := f.Close(); err != nil {
		tb.Fatal(err)
	}
}

// TestRunFluidAsMeasured runs the whole job on a site whose fluid is given
// by its measured density and viscosity: check passes, and the report names
// the fluid with the values it was modelled with.
func TestRunFluidAsMeasured(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "site")
	if err := os.CopyFS(dir, os.DirFS(filepath.Join("..", "site", "testdata", "small"))); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(dir, "site.csv"))
	if err != nil {
		t.Fatal(err)
	}
	text := strings.Replace(string(b), "fluid,propylene-glycol,\nglycol [%],30,\n",
		"fluid,other,\ndensity [kg/m3],1031.5,lab sample\nkinematic viscosity [cSt],4.2,lab sample\n", 1)
	if text == string(b) {
		t.Fatal("fixture's fluid lines not found")
	}
	if err := os.WriteFile(filepath.Join(dir, "site.csv"), []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, out, errs := run(t, "check", dir); code != ExitOK {
		t.Fatalf("check: exit %d\n%s%s", code, out, errs)
	}
	out := filepath.Join(t.TempDir(), "out")
	if code, _, errs := run(t, "run", dir, "--out", out); code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d, stderr:\n%s", code, errs)
	}
	html, err := os.ReadFile(filepath.Join(out, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	// 4.2 mm2/s times 1031.5 kg/m3 is 4.332 mPa s.
	if want := "a fluid not in the tables (as measured: 1032 kg/m3, 4.332 mPa s)"; !strings.Contains(string(html), want) {
		t.Errorf("report does not name the fluid as %q", want)
	}
}

// TestCurvesOpenCircuit gives the demo site a static lift and an outlet
// pressure: its system curve starts there at no flow, the operating point
// lies above it, and the whole job runs.
func TestCurvesOpenCircuit(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "site")
	if err := os.CopyFS(dir, os.DirFS(surveyDir("demo"))); err != nil {
		t.Fatal(err)
	}
	appendLine(t, filepath.Join(dir, "site.csv"), "\nstatic lift [m],4\noutlet pressure [kPa],15")
	code, out, errs := run(t, "check", dir)
	if code != ExitOK || !strings.Contains(out, "open circuit: static lift 4.00 m, outlet pressure 15.0 kPa") {
		t.Fatalf("check: exit %d\n%s%s", code, out, errs)
	}
	code, out, errs = run(t, "curves", "--format", "json", dir)
	if code != ExitOK {
		t.Fatalf("curves: exit %d: %s", code, errs)
	}
	var cs curveSet
	if err := json.Unmarshal([]byte(out), &cs); err != nil {
		t.Fatal(err)
	}
	// 4 m of water at 70 degC (977.76 kg/m3, IAPWS-IF97; about 977.8 in
	// the CRC table) is 38.35 kPa, plus 15 kPa at the outlet.
	if math.Abs(cs.StaticLift-53.35) > 0.01 {
		t.Errorf("static lift %.3f kPa, want 53.35", cs.StaticLift)
	}
	if p := cs.System[0]; p.Flow != 0 || math.Abs(p.Diff-cs.StaticLift) > 1e-9 {
		t.Errorf("system curve starts at %+v, want no flow at the static lift %.3f kPa", p, cs.StaticLift)
	}
	for k := 1; k < len(cs.System); k++ {
		if !(cs.System[k].Flow > cs.System[k-1].Flow) {
			t.Errorf("system curve flow not rising at point %d: %+v", k, cs.System[k-1:k+1])
		}
	}
	if !(cs.Operating.Diff > cs.StaticLift) {
		t.Errorf("operating point %+v not above the static lift", cs.Operating)
	}
	if code, out, _ := run(t, "curves", dir); code != ExitOK || !strings.Contains(out, "open circuit: the system curve starts at the static lift, 53.4 kPa at no flow") {
		t.Errorf("curves table: exit %d\n%s", code, out)
	}
	code, out, errs = run(t, "run", dir, "--out", filepath.Join(t.TempDir(), "out"))
	if code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d, stderr:\n%s", code, errs)
	}
	if want := "53.4 kPa lifts the water to the open outlet"; !strings.Contains(strings.Join(strings.Fields(out), " "), want) {
		t.Errorf("run's pump step does not say %q:\n%s", want, out)
	}
}

// TestOpenCircuitLikeClosed lifts the demo site consistently: a static lift
// and an outlet pressure, the pump curve raised by them and every pump
// differential read raised by as much. The friction is the closed demo's,
// so the plan must set every valve as for the demo and ask the pump for
// the demo's differentials plus the lift (the fitted pump-head multiplier
// now scales the lift too, hence the small tolerances).
func TestOpenCircuitLikeClosed(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "site")
	if err := os.CopyFS(dir, os.DirFS(surveyDir("demo"))); err != nil {
		t.Fatal(err)
	}
	appendLine(t, filepath.Join(dir, "site.csv"), "static lift [m],4\noutlet pressure [kPa],15")
	l, err := loadSite(context.Background(), dir, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	lift := l.Model.Lift()
	rg := l.Model.Fluid.Density * 9.80665
	rewrite := func(name string, col int, add float64) {
		t.Helper()
		path := filepath.Join(dir, name)
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		rows, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range rows[1:] {
			if name == "readings.csv" && r[2] != "pump diff" {
				continue
			}
			var v float64
			if _, err := fmt.Sscan(r[col], &v); err != nil {
				t.Fatal(err)
			}
			r[col] = strconv.FormatFloat(v+add, 'g', -1, 64)
		}
		var out bytes.Buffer
		w := csv.NewWriter(&out)
		w.WriteAll(rows)
		if err := os.WriteFile(path, out.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	rewrite("pump.csv", 1, lift/rg)       // head [m]
	rewrite("readings.csv", 3, lift/1000) // pump diff [kPa]
	plan := func(site string) map[string]any {
		t.Helper()
		code, out, errs := run(t, "plan", "--json", site)
		if code != ExitOK {
			t.Fatalf("plan %s: exit %d: %s", site, code, errs)
		}
		var v map[string]any
		if err := json.Unmarshal([]byte(out), &v); err != nil {
			t.Fatal(err)
		}
		return v
	}
	closed, open := plan(surveyDir("demo")), plan(dir)
	for _, k := range []string{"least_differential_pa", "required_differential_pa"} {
		c, o := closed[k].(float64), open[k].(float64)
		if math.Abs(o-c-lift) > 1e-4*c {
			t.Errorf("%s: %.1f Pa open, %.1f Pa closed: differ by %.1f Pa, want the lift %.1f Pa", k, o, c, o-c, lift)
		}
	}
	cb, ob := closed["branches"].([]any), open["branches"].([]any)
	if len(cb) != len(ob) || len(cb) == 0 {
		t.Fatalf("%d branches closed, %d open", len(cb), len(ob))
	}
	for i := range cb {
		c, o := cb[i].(map[string]any), ob[i].(map[string]any)
		if c["new_setting"] != o["new_setting"] {
			t.Errorf("branch %v: setting %v open, %v closed", c["branch"], o["new_setting"], c["new_setting"])
		}
		cq, oq := c["predicted_m3_s"].(float64), o["predicted_m3_s"].(float64)
		if math.Abs(oq/cq-1) > 1e-4 {
			t.Errorf("branch %v: predicted flow %.6g open, %.6g closed", c["branch"], oq, cq)
		}
	}
}
