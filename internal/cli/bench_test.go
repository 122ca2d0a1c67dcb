package cli

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"flowset/internal/cpuclock"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// writeSynthetic writes a generated site of n branches (with hidden faults
// and a one-state survey) into a folder and returns it.
func writeSynthetic(tb testing.TB, n int) string {
	tb.Helper()
	return writeSpec(tb, synth.Spec{Branches: n, Arrangement: site.DirectReturn, Nested: true,
		Seed: 7, Fouled: 0.05, Free: 0.02, Noise: 1, States: 1})
}

// risersSpec is a large building's site of n branches: risers of about 30
// terminals (radiators, fan coils, a few air-handler coils) on a
// direct-return main, 5 % of the terminals fouled, one survey state read
// with synth.SurveyMix (70 % valve meter with the valve differential, 30 %
// clamp-on, half with a branch differential; about 14 % of the valve
// differentials below 3 kPa at 1,000 branches, 20 % at 10,000).
func risersSpec(n int) synth.Spec {
	return synth.Spec{Branches: n, Arrangement: site.DirectReturn, RiserTerminals: 30,
		Seed: 7, Fouled: 0.05, Noise: 1, States: 1, Readings: synth.SurveyMix()}
}

// writeSpec writes the site generated from spec into a folder and returns it.
func writeSpec(tb testing.TB, spec synth.Spec) string {
	tb.Helper()
	s, _, err := synth.Generate(context.Background(), spec)
	if err != nil {
		tb.Fatal(err)
	}
	return writeSite(tb, s)
}

// BenchmarkRun is the whole job (read, check, fit, diagnose, plan, report,
// field sheets) on generated sites; it reports the report's size.
func BenchmarkRun(b *testing.B) {
	for _, n := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			largeBench(b, n)
			benchRun(b, writeSynthetic(b, n))
		})
	}
}

// benchRun times `flowset run` on the site in dir and reports the report's
// size.
func benchRun(b *testing.B, dir string) {
	out := filepath.Join(b.TempDir(), "out")
	var size int64
	for b.Loop() {
		var so, se bytes.Buffer
		if code := RunIO(context.Background(), []string{"run", dir, "--out", out, "--force", "--quiet"}, &IO{Out: &so, Err: &se, Now: fixedClock}); code != ExitOK && code != ExitShort {
			b.Fatalf("run: exit %d: %s", code, se.String())
		}
		st, err := os.Stat(filepath.Join(out, "report.html"))
		if err != nil {
			b.Fatal(err)
		}
		size = st.Size()
	}
	b.ReportMetric(float64(size), "report-bytes")
}

// largeBench says whether the 100,000-branch benchmarks run: they take
// minutes, so only with FLOWSET_BENCH_LARGE set and not under -short.
func largeBench(b *testing.B, n int) {
	if n >= 100000 && (testing.Short() || os.Getenv("FLOWSET_BENCH_LARGE") == "") {
		b.Skip("100,000 branches: set FLOWSET_BENCH_LARGE=1 (takes minutes)")
	}
}

// BenchmarkRunRisers is the whole job on a large building's generated site
// (risersSpec: risers of about 30 terminals, 70 % of the flows by valve
// meter, small valve differentials, 5 % fouled). It reports the process CPU
// time per run (the machine is shared) and the report's size.
func BenchmarkRunRisers(b *testing.B) {
	for _, n := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			largeBench(b, n)
			cpu := cpuclock.Start()
			benchRun(b, writeSpec(b, risersSpec(n)))
			cpu.Report(b)
		})
	}
}

// TestWriteRisersSite writes the BenchmarkRunRisers site of
// FLOWSET_RISERS_SITE=N:DIR branches into DIR, for timing the binary
// (/usr/bin/time -v flowset run DIR); skipped without the variable.
func TestWriteRisersSite(t *testing.T) {
	v := os.Getenv("FLOWSET_RISERS_SITE")
	if v == "" {
		t.Skip("set FLOWSET_RISERS_SITE=N:DIR to write a site")
	}
	ns, dir, ok := strings.Cut(v, ":")
	n, err := strconv.Atoi(ns)
	if !ok || err != nil {
		t.Fatalf("FLOWSET_RISERS_SITE=%q, want N:DIR", v)
	}
	s, _, err := synth.Generate(context.Background(), risersSpec(n))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := site.WriteDir(s, func(name string) (io.WriteCloser, error) { return os.Create(filepath.Join(dir, name)) }); err != nil {
		t.Fatal(err)
	}
}

// TestRunSynthetic runs the whole job on a generated 200-branch site with
// planted faults: it must finish, and flag the fouled branches.
func TestRunSynthetic(t *testing.T) {
	if testing.Short() {
		t.Skip("generates and fits a 200-branch site")
	}
	s, truth, err := synth.Generate(context.Background(), synth.Spec{Branches: 200, Arrangement: site.ReverseReturn, Nested: true,
		Seed: 11, Fouled: 0.05, Noise: 1, States: 1})
	if err != nil {
		t.Fatal(err)
	}
	dir := writeSite(t, s)
	out := filepath.Join(t.TempDir(), "out")
	code, stdout, errs := run(t, "run", dir, "--out", out)
	// Five per cent of the branches fouled: the plan may fall short (exit 5).
	if code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d: %s", code, errs)
	}
	clamped := map[string]bool{}
	for _, r := range s.Readings {
		if r.What == site.Flow && r.Instrument == "clamp-on" {
			clamped[r.Where] = true
		}
	}
	found, planted := 0, 0
	for i, f := range truth.Faults {
		if f != synth.Fouled || !clamped[s.Branches[i].ID] {
			continue
		}
		planted++
		id := s.Branches[i].ID
		if bytes.Contains([]byte(stdout), []byte(id+" (restricted, fault)")) {
			found++
		}
	}
	if planted == 0 {
		t.Fatal("the generator planted no fouled branch with a clamp-on reading; the test proves nothing")
	}
	// Fouling by 2-4x on a branch read with a clamp-on flow is far outside
	// the instruments' uncertainty; every such planted fault should be
	// flagged. (Branches the survey did not read are left to the fit's
	// "undetermined" finding.)
	if found < planted {
		t.Errorf("flagged %d of %d fouled branches:\n%s", found, planted, stdout)
	}
}

// TestConsoleLargeSite: on a site of more than consoleRows branches with
// the report and sheets written, the console names the files for the
// settings instead of printing a row per valve, and keeps only the flagged
// branches of the fit; `plan` without --out (the console its only output)
// still prints every setting.
func TestConsoleLargeSite(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a 300-branch site")
	}
	dir := writeSpec(t, synth.Spec{Branches: 300, Arrangement: site.DirectReturn, RiserTerminals: 30,
		Seed: 5, Fouled: 0.05, Noise: 1, States: 1, Readings: synth.SurveyMix()})
	code, stdout, errs := run(t, "run", dir, "--out", filepath.Join(t.TempDir(), "out"))
	if code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d: %s", code, errs)
	}
	if !strings.Contains(stdout, "300 valves to set") || !strings.Contains(stdout, "field-sheet.csv") {
		t.Errorf("run: the settings step does not name the field sheet:\n%s", stdout)
	}
	if strings.Contains(stdout, "Set to") {
		t.Errorf("run: the console prints the settings table of 300 valves")
	}
	if n := strings.Count(stdout, "\n"); n > 400 {
		t.Errorf("run: %d console lines for 300 branches", n)
	}
	code, stdout, errs = run(t, "plan", dir)
	if code != ExitOK && code != ExitShort {
		t.Fatalf("plan: exit %d: %s", code, errs)
	}
	if !strings.Contains(stdout, "Set to") || strings.Count(stdout, "R1.") < 25 {
		t.Errorf("plan without --out does not print every setting:\n%.2000s", stdout)
	}
}

// TestConsoleFitCapped: on a large site where more than consoleRows branches
// have a finding, the fit's table on the console keeps the consoleRows
// furthest from design and says how many there are and where all of them are.
func TestConsoleFitCapped(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a 300-branch site")
	}
	dir := writeSpec(t, synth.Spec{Branches: 300, Arrangement: site.DirectReturn, RiserTerminals: 30,
		Seed: 5, Fouled: 0.6, Noise: 1, States: 1, Readings: synth.SurveyMix()})
	code, stdout, errs := run(t, "run", dir, "--out", filepath.Join(t.TempDir(), "out"))
	if code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d: %s", code, errs)
	}
	_, table, ok := strings.Cut(stdout, "\nbranch ")
	if !ok {
		t.Fatalf("run: no fit table:\n%s", stdout)
	}
	table, _, _ = strings.Cut(table, "\n\n")
	rows := strings.Count(table, "\n")
	if !strings.Contains(stdout, fmt.Sprintf("The %d branches with a finding furthest from design, of ", consoleRows)) {
		t.Fatalf("run: the capped fit table is not announced (%d rows):\n%s", rows, stdout)
	}
	// The header line, consoleRows rows and the wrapped summary line(s).
	if rows < consoleRows || rows > consoleRows+4 {
		t.Errorf("run: the fit table has %d lines, want %d rows and the summary", rows, consoleRows)
	}
}
