package cli

import (
	"bytes"
	"context"
	"io/fs"
	"os"
	"path"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"flowset/surveys"
)

// fuzzSheets are the sheet names FuzzRun may replace: the plantroom site's
// four and the two it lacks, so the fuzzer can add a pump or targets sheet.
var fuzzSheets = []string{"site.csv", "branches.csv", "valves.csv", "readings.csv", "pump.csv", "targets.csv"}

// FuzzRun runs the whole job on the plantroom site with one sheet replaced
// by the fuzzer's bytes. The run must not panic, must end with exit 0 or 1
// (a data problem is never a usage error), must not hang, and when it
// succeeds no output may hold a non-finite number. Fuzz it with
//
//	go test ./internal/cli -run '^$' -fuzz FuzzRun -fuzztime 3m -fuzzminimizetime 5s
func FuzzRun(f *testing.F) {
	base := plantroomSheets(f)
	for i, name := range fuzzSheets {
		if b, ok := base[name]; ok {
			f.Add(uint8(i), b)
		}
	}
	// The demo's pump sheet; the plantroom's boundary ignores it until the
	// site sheet is fuzzed into a pump boundary.
	pump, err := fs.ReadFile(surveys.FS, "demo/pump.csv")
	if err != nil {
		f.Fatal(err)
	}
	f.Add(uint8(4), pump)
	f.Add(uint8(5), []byte("branch,target flow [l/s]\nAC-1,0.45\nIMM-3,0.8\n"))
	f.Add(uint8(1), bytes.Replace(base["branches.csv"], []byte("AC-1,,"), []byte("AC-1,IMM-3,"), 1))
	f.Add(uint8(0), bytes.Replace(base["site.csv"], []byte("set point [kPa],85"), []byte("set point [kPa],0.003"), 1))
	// AC-1 hanging from IMM-3, which a differential controller holds.
	var ctl []string
	for i, line := range strings.Split(strings.TrimSpace(string(bytes.Replace(base["branches.csv"], []byte("AC-1,,"), []byte("AC-1,IMM-3,"), 1))), "\n") {
		switch {
		case i == 0:
			ctl = append(ctl, line+",controller set point [kPa],controller kvs,controller min [kPa],controller max [kPa]")
		case strings.HasPrefix(line, "IMM-3,"):
			ctl = append(ctl, line+",40,12,10,80")
		default:
			ctl = append(ctl, line+",,,,")
		}
	}
	f.Add(uint8(1), []byte(strings.Join(ctl, "\n")+"\n"))
	// W25 (IMM-3, AC-1) as a pressure-independent valve, its range in
	// turns kept so the recorded settings stay in it (AC-1's valve-meter
	// reading then makes it a data error until the fuzzer changes it).
	var held []string
	for i, line := range strings.Split(strings.TrimSpace(string(base["valves.csv"])), "\n") {
		switch {
		case i == 0:
			held = append(held, line+",max flow [l/s],hold diff [kPa]")
		case !strings.HasPrefix(line, "W25,"):
			held = append(held, line+",,")
		}
	}
	held = append(held, "W25,turns,0.1,3,0.5,,,,,,0.3,25", "W25,turns,0.1,3,2,,,,,,0.7,", "W25,turns,0.1,3,4,,,,,,1.2,")
	f.Add(uint8(2), []byte(strings.Join(held, "\n")+"\n"))

	f.Fuzz(func(t *testing.T, sheet uint8, data []byte) {
		name := fuzzSheets[int(sheet)%len(fuzzSheets)]
		dir := filepath.Join(t.TempDir(), "site")
		if err := os.Mkdir(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		for n, b := range base {
			if n != name {
				if err := os.WriteFile(filepath.Join(dir, n), b, 0o644); err != nil {
					t.Fatal(err)
				}
			}
		}
		if err := os.WriteFile(filepath.Join(dir, name), data, 0o644); err != nil {
			t.Fatal(err)
		}
		out := filepath.Join(t.TempDir(), "out")
		// A generous budget: a run of this six-branch site takes
		// milliseconds, so only a hang reaches it.
		ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
		defer cancel()
		var so, se bytes.Buffer
		code := RunIO(ctx, []string{"run", dir, "--out", out}, &IO{In: strings.NewReader(""), Out: &so, Err: &se, Now: fixedClock})
		if ctx.Err() != nil {
			t.Fatalf("run with %s fuzzed did not finish in 60 s; stderr:\n%s", name, se.String())
		}
		switch code {
		case ExitOK, ExitShort:
		case ExitData:
			if !strings.Contains(se.String(), "flowset: ") {
				t.Errorf("run with %s fuzzed: exit 1 without saying why; stderr:\n%s", name, se.String())
			}
			return
		default:
			t.Fatalf("run with %s fuzzed: exit %d, want 0, 1 or 5; stderr:\n%s", name, code, se.String())
		}
		bad := scanText("stdout", so.String())
		bad = append(bad, scanOutputs(t, out)...)
		bad = append(bad, planNulls(t, out)...)
		for _, b := range bad {
			t.Errorf("run with %s fuzzed: non-finite number: %s", name, b)
		}
	})
}

// plantroomSheets returns the built-in plantroom site's sheets by file name,
// the seed of the whole-job fuzz targets.
func plantroomSheets(tb testing.TB) map[string][]byte {
	tb.Helper()
	base := map[string][]byte{}
	err := fs.WalkDir(surveys.FS, "plantroom", func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := fs.ReadFile(surveys.FS, p)
		base[path.Base(p)] = b
		return err
	})
	if err != nil {
		tb.Fatal(err)
	}
	return base
}
