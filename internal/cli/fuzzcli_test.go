package cli

import (
	"bytes"
	"context"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"
)

// fuzzCommands are the commands FuzzCommandLine drives.
var fuzzCommands = []string{"check", "curves", "fit", "plan", "run", "template", "demo", "help"}

// FuzzCommandLine drives the whole command line: a command, fuzzed extra
// arguments (flags and their values), a fuzzed name for the site folder and
// the output, where the output points (a new folder, an existing output,
// the site, the site's parent, a file of the user's), and one sheet of the
// plantroom site replaced by fuzzed bytes. Whatever it is given, flowset must keep its promises:
//
//   - no panic reaches the caller and no internal error is reported;
//   - the exit status is one of the documented ones;
//   - nothing printed holds a control, invisible or direction character raw;
//   - the input sheets and the user's file are byte for byte unchanged;
//   - nothing is visible but the whole output: no temporary or lock file
//     is left, and a run that did not succeed leaves no output folder;
//   - it returns within the time limit.
//
// Fuzz it with
//
//	go test ./internal/cli -run '^$' -fuzz FuzzCommandLine -fuzztime 5m -fuzzminimizetime 5s
func FuzzCommandLine(f *testing.F) {
	base := plantroomSheets(f)
	f.Add(uint8(4), "", uint8(0), "out", uint8(1), base["branches.csv"])
	f.Add(uint8(4), "--force", uint8(1), "out", uint8(1), base["branches.csv"])
	f.Add(uint8(4), "--force", uint8(2), "", uint8(3), base["readings.csv"])
	f.Add(uint8(4), "--force", uint8(3), "", uint8(0), base["site.csv"])
	f.Add(uint8(3), "--scale NaN", uint8(0), "out", uint8(1), base["branches.csv"])
	f.Add(uint8(2), "--confidence 0.7 --suspect-z 2", uint8(0), "o\x1b[31m\nx", uint8(3), base["readings.csv"])
	f.Add(uint8(5), "--force", uint8(4), "blank.xlsx", uint8(0), base["site.csv"])
	f.Add(uint8(5), "", uint8(0), "blank", uint8(0), base["site.csv"])
	f.Add(uint8(7), "nosuch", uint8(0), "", uint8(0), base["site.csv"])
	f.Add(uint8(1), "--format csv", uint8(0), "", uint8(2), []byte("model,setting,kv\nBW-50,1,0\n"))
	f.Add(uint8(0), "", uint8(0), "", uint8(1), []byte("id,design flow [l/s\nA\u202e,1\n"))
	f.Add(uint8(6), "--site plantroom --force", uint8(1), "out", uint8(0), base["site.csv"])

	f.Fuzz(func(t *testing.T, cmd uint8, extra string, where uint8, name string, sheet uint8, data []byte) {
		root := t.TempDir()
		// The site folder takes the fuzzed name too (control characters,
		// newlines, direction marks), or "site" where the system refuses it.
		dir := filepath.Join(root, "p", "site"+strings.ReplaceAll(name, "/", "_"))
		if len(name) > 64 || strings.ContainsRune(name, 0) || os.MkdirAll(dir, 0o755) != nil {
			dir = mkdir(t, filepath.Join(root, "p", "site"))
		}
		sheetName := fuzzSheets[int(sheet)%len(fuzzSheets)]
		for n, b := range base {
			if err := os.WriteFile(filepath.Join(dir, n), b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
		if err := os.WriteFile(filepath.Join(dir, sheetName), data, 0o644); err != nil {
			t.Fatal(err)
		}
		mine := filepath.Join(root, "mine.txt")
		if err := os.WriteFile(mine, []byte("the user's own file"), 0o644); err != nil {
			t.Fatal(err)
		}
		name = strings.ReplaceAll(name, "/", "_")
		if len(name) > 64 || name == "." || name == ".." || strings.ContainsRune(name, 0) {
			name = "out"
		}
		var out string
		switch where % 6 {
		case 0, 1: // a new folder (1: after a first run made it)
			out = filepath.Join(root, "o", name+"x")
		case 2:
			out = dir
		case 3:
			out = filepath.Join(root, "p")
		case 4:
			out = filepath.Join(root, name+"x.xlsx")
		default:
			out = mine
		}
		c := fuzzCommands[int(cmd)%len(fuzzCommands)]
		args := []string{c}
		switch c {
		case "template":
			args = append(args, out)
		case "help", "demo":
		default:
			args = append(args, dir)
		}
		if c == "run" || c == "fit" || c == "plan" || c == "demo" {
			args = append(args, "--out", out, "--quiet")
		}
		words := strings.Fields(extra)
		if len(words) > 8 {
			words = words[:8]
		}
		args = append(args, words...)

		runOnce := func() int {
			ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
			defer cancel()
			var so, se bytes.Buffer
			code := RunIO(ctx, args, &IO{In: strings.NewReader(""), Out: &so, Err: &se, Now: fixedClock})
			if ctx.Err() != nil {
				t.Fatalf("flowset %q did not finish in 60 s", args)
			}
			if c := rawControls(so.String() + se.String()); len(c) > 0 {
				t.Fatalf("flowset %q printed %q raw", args, c)
			}
			if code == ExitInternal {
				t.Fatalf("flowset %q: internal error:\n%s", args, se.String())
			}
			if !slices.Contains(exitStatuses, code) {
				t.Fatalf("flowset %q: exit %d, not a documented status", args, code)
			}
			return code
		}
		if where%6 == 1 {
			runOnce() // the output may now exist
		}
		before := world(t, dir)
		_, existed := os.Lstat(out)
		code := runOnce()
		if d := diffWorld(before, world(t, dir)); len(d) > 0 {
			t.Fatalf("flowset %q (exit %d) changed the input: %v", args, code, d)
		}
		if b, err := os.ReadFile(mine); err != nil || string(b) != "the user's own file" {
			t.Fatalf("flowset %q changed the user's file: %v %q", args, err, b)
		}
		err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
			if err != nil {
				return err
			}
			if strings.HasPrefix(d.Name(), ".") && d.Name() != markerName {
				t.Errorf("flowset %q left %s", args, p)
			}
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := os.Lstat(out); err == nil && existed != nil && code != ExitOK && code != ExitShort {
			t.Errorf("flowset %q: exit %d left the output %s", args, code, out)
		}
	})
}
