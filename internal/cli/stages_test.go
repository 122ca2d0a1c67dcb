package cli

import (
	"archive/zip"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"testing"

	"github.com/google/go-cmp/cmp"

	"flowset/surveys"
)

// TestRunConcurrentSame runs the whole job with its stages after the fit
// side by side (four workers, more than the test machine's processors, so
// they interleave) and one after another: every output file, stdout and
// stderr must be the same byte for byte (the workbook compared part by
// part: its zip stamps the time of writing).
func TestRunConcurrentSame(t *testing.T) {
	type tc struct {
		name string
		args func(out string) []string
	}
	cases := []tc{
		{"demo", func(out string) []string { return []string{"demo", "--out", out} }},
		{"demo design only (ranks the survey to take first)", func(out string) []string {
			return []string{"demo", "--out", out, "--design-only"}
		}},
		{"demo in US units", func(out string) []string { return []string{"demo", "--out", out, "--units", "us"} }},
	}
	planDir := filepath.Join(t.TempDir(), "plan")
	if code, _, stderr := run(t, "plan", surveyDir("demo"), "--out", planDir, "--quiet"); code != ExitOK {
		t.Fatalf("plan: exit %d: %s", code, stderr)
	}
	cases = append(cases, tc{"trim of the demo", func(out string) []string {
		return []string{"trim", surveyDir("demo"), "--plan", filepath.Join(planDir, "plan.json"), "--out", out}
	}})
	for _, name := range surveys.Names() {
		cases = append(cases, tc{"survey " + name, func(out string) []string { return []string{"run", surveyDir(name), "--out", out} }})
	}
	if !testing.Short() {
		// Risers with fouled terminals: restricted branches (a plan per
		// repair), the ranking of readings and larger curves.
		site := writeSpec(t, risersSpec(300))
		cases = append(cases, tc{"risers 300", func(out string) []string { return []string{"run", site, "--out", out} }})
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			type result struct {
				code     int
				out, err string
				files    map[string]string
			}
			runWith := func(workers int) result {
				dir := filepath.Join(t.TempDir(), "out")
				var so, se bytes.Buffer
				code := RunIO(context.Background(), c.args(dir), &IO{In: strings.NewReader(""), Out: &so, Err: &se, Now: fixedClock, workers: workers})
				if code != ExitOK && code != ExitShort {
					t.Fatalf("workers %d: exit %d: %s", workers, code, se.String())
				}
				return result{code, strings.ReplaceAll(so.String(), dir, "OUT"), strings.ReplaceAll(se.String(), dir, "OUT"), outputFiles(t, dir)}
			}
			serial, side := runWith(1), runWith(4)
			if serial.code != side.code {
				t.Errorf("exit %d one after another, %d side by side", serial.code, side.code)
			}
			if d := cmp.Diff(serial.out, side.out); d != "" {
				t.Errorf("stdout (-one after another +side by side):\n%s", d)
			}
			if d := cmp.Diff(serial.err, side.err); d != "" {
				t.Errorf("stderr (-one after another +side by side):\n%s", d)
			}
			if len(serial.files) < 5 {
				t.Fatalf("only %d outputs", len(serial.files))
			}
			for name, want := range serial.files {
				if got, ok := side.files[name]; !ok {
					t.Errorf("%s: missing side by side", name)
				} else if got != want {
					t.Errorf("%s differs side by side (%d bytes against %d)", name, len(got), len(want))
				}
			}
			for name := range side.files {
				if _, ok := serial.files[name]; !ok {
					t.Errorf("%s: only side by side", name)
				}
			}
		})
	}
}

// outputFiles reads an output folder: each file's bytes by name, a
// workbook's parts each under its own name (the marker, which holds the
// workbook's checksum, is left out).
func outputFiles(t *testing.T, dir string) map[string]string {
	t.Helper()
	out := map[string]string{}
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if e.Name() == markerName {
			continue
		}
		b, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		if !strings.HasSuffix(e.Name(), ".xlsx") {
			out[e.Name()] = string(b)
			continue
		}
		z, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
		if err != nil {
			t.Fatal(err)
		}
		for _, f := range z.File {
			r, err := f.Open()
			if err != nil {
				t.Fatal(err)
			}
			part, err := io.ReadAll(r)
			r.Close()
			if err != nil {
				t.Fatal(err)
			}
			out[e.Name()+"/"+f.Name] = string(part)
		}
	}
	return out
}

// TestStages checks the stage runner: results by index whatever the order
// the stages end in, the first error by index, and a panic carried to the
// goroutine that reads the result.
func TestStages(t *testing.T) {
	for _, workers := range []int{1, 2, 4} {
		t.Run(fmt.Sprint("workers=", workers), func(t *testing.T) {
			st := newStages(workers)
			var ran atomic.Int64
			got, errs := each(st, 50, func(k int) (int, error) {
				ran.Add(1)
				if k == 7 || k == 30 {
					return 0, fmt.Errorf("stage %d", k)
				}
				return k * k, nil
			})
			if ran.Load() != 50 {
				t.Errorf("ran %d stages, want 50", ran.Load())
			}
			for k, v := range got {
				if errs[k] == nil && v != k*k {
					t.Errorf("result %d = %d, want %d", k, v, k*k)
				}
			}
			if errs[7] == nil || errs[30] == nil || errs[8] != nil {
				t.Errorf("errors %v", errs)
			}
			fu := start(st, func() (string, error) { return "", errors.New("failed") })
			if _, err := fu.get(); err == nil || err.Error() != "failed" {
				t.Errorf("future's error = %v", err)
			}
			func() {
				defer func() {
					if r := recover(); r != "boom" {
						t.Errorf("recovered %v, want the stage's panic", r)
					}
				}()
				// Serial, the panic comes out of start itself.
				start(st, func() (int, error) { panic("boom") }).get()
				t.Error("get returned after the stage panicked")
			}()
			st.wait()
		})
	}
}
