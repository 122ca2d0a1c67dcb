package cli

import (
	"bytes"
	"context"
	"crypto/sha256"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
)

// world lists everything under root: each folder, each symbolic link with
// its target and each file with its checksum, so a test sees any change.
func world(t *testing.T, root string) map[string]string {
	t.Helper()
	out := map[string]string{}
	err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(root, p)
		switch {
		case d.Type()&fs.ModeSymlink != 0:
			target, err := os.Readlink(p)
			out[rel] = "link " + target
			return err
		case d.IsDir():
			out[rel] = "dir"
		default:
			b, err := os.ReadFile(p)
			out[rel] = string(sha256.New().Sum(b))
			return err
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func diffWorld(a, b map[string]string) []string {
	var d []string
	for k, v := range a {
		if w, ok := b[k]; !ok {
			d = append(d, "removed "+k)
		} else if w != v {
			d = append(d, "changed "+k)
		}
	}
	for k := range b {
		if _, ok := a[k]; !ok {
			d = append(d, "added "+k)
		}
	}
	return d
}

func mustWrite(t *testing.T, p, text string) {
	t.Helper()
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
}

func mustRun(t *testing.T, args ...string) {
	t.Helper()
	if code, _, errs := run(t, args...); code != ExitOK {
		t.Fatalf("flowset %q: exit %d: %s", args, code, errs)
	}
}

// TestOutputRefused runs commands whose output would destroy or land among
// what flowset did not write: each must exit 2 with the wanted words and
// leave every file and folder under the test's root as it was.
func TestOutputRefused(t *testing.T) {
	for _, c := range []struct {
		name  string
		setup func(t *testing.T, root string) // root holds a copy of the demo site in root/p/site
		args  func(root string) []string
		want  string
	}{
		{"--force on the folder holding the site", nil,
			func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/p", "--force"} }, "holds the input"},
		{"--force on the site folder itself", nil,
			func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/p/site", "--force"} }, "is the input"},
		{"--out inside the site", nil,
			func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/p/site/out"} }, "inside the input"},
		{"--out a symbolic link to the site, --force", func(t *testing.T, r string) {
			if err := os.Symlink(r+"/p/site", r+"/link"); err != nil {
				t.Skip(err)
			}
		}, func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/link", "--force"} }, "symbolic link"},
		{"--out through a symbolic link into the site", func(t *testing.T, r string) {
			if err := os.Symlink(r+"/p/site", r+"/link"); err != nil {
				t.Skip(err)
			}
		}, func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/link/out"} }, "inside the input"},
		{"site named through a symbolic link, --out its parent", func(t *testing.T, r string) {
			if err := os.Symlink(r+"/p", r+"/alias"); err != nil {
				t.Skip(err)
			}
		}, func(r string) []string { return []string{"run", r + "/alias/site", "--out", r + "/p", "--force"} }, "holds the input"},
		{"--force on an unrelated folder", func(t *testing.T, r string) { mustWrite(t, r+"/mine/notes.txt", "keep me") },
			func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/mine", "--force"} }, "was not written by flowset"},
		{"--force on an empty folder", func(t *testing.T, r string) { os.Mkdir(r+"/empty", 0o755) },
			func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/empty", "--force"} }, "was not written by flowset"},
		{"--force on a file", func(t *testing.T, r string) { mustWrite(t, r+"/file", "data") },
			func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/file", "--force"} }, "is not a folder flowset wrote"},
		{"--force on an output with a file added", func(t *testing.T, r string) {
			mustRun(t, "run", r+"/p/site", "--out", r+"/out", "--quiet")
			mustWrite(t, r+"/out/my-notes.txt", "as set on site")
		}, func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/out", "--force"} }, "my-notes.txt, which flowset did not write"},
		{"--force on an output with a file changed", func(t *testing.T, r string) {
			mustRun(t, "run", r+"/p/site", "--out", r+"/out", "--quiet")
			mustWrite(t, r+"/out/field-sheet.csv", "settings as found on the day")
		}, func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/out", "--force"} }, "field-sheet.csv, changed since"},
		{"--force on an output with a forged marker", func(t *testing.T, r string) {
			mustWrite(t, r+"/mine/notes.txt", "keep me")
			mustWrite(t, r+"/mine/"+markerName, "flowset\n")
		}, func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/mine", "--force"} }, "was not written by flowset"},
		{"--force on a symbolic link to an output", func(t *testing.T, r string) {
			mustRun(t, "run", r+"/p/site", "--out", r+"/out", "--quiet")
			if err := os.Symlink(r+"/out", r+"/outlink"); err != nil {
				t.Skip(err)
			}
		}, func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/outlink", "--force"} }, "symbolic link"},
		{"--out . holding the site, --force", func(t *testing.T, r string) { t.Chdir(r + "/p") },
			func(r string) []string { return []string{"run", "site", "--out", ".", "--force"} }, "holds the input"},
		{"--out . with --force", func(t *testing.T, r string) { t.Chdir(mkdir(t, r+"/work")) },
			func(r string) []string { return []string{"run", r + "/p/site", "--out", ".", "--force"} }, "current folder"},
		{"--out . without --force", func(t *testing.T, r string) { t.Chdir(mkdir(t, r+"/work")) },
			func(r string) []string { return []string{"run", r + "/p/site", "--out", "."} }, "current folder"},
		{"--out the parent of the current folder, --force", func(t *testing.T, r string) { t.Chdir(mkdir(t, r+"/work/deep")) },
			func(r string) []string { return []string{"run", r + "/p/site", "--out", "..", "--force"} }, "current folder"},
		{"--out below a file", func(t *testing.T, r string) { mustWrite(t, r+"/file", "data") },
			func(r string) []string { return []string{"run", r + "/p/site", "--out", r + "/file/deeper/out"} }, "is a file, not a folder"},
		{"--out the root", nil, func(r string) []string { return []string{"run", r + "/p/site", "--out", "/", "--force"} }, "root of the file system"},
		{"template --force on a filled-in site", func(t *testing.T, r string) {
			mustRun(t, "template", r+"/blank")
			mustWrite(t, r+"/blank/branches.csv", "id,design flow [l/s]\nAHU-1,1.2\n")
		}, func(r string) []string { return []string{"template", r + "/blank", "--force"} }, "branches.csv, changed since"},
		{"template --force on the site", nil, func(r string) []string { return []string{"template", r + "/p/site", "--force"} }, "was not written by flowset"},
		{"template --force on a workbook of the user's", func(t *testing.T, r string) { mustWrite(t, r+"/site.xlsx", "PK mine") },
			func(r string) []string { return []string{"template", r + "/site.xlsx", "--force"} }, "not an untouched file flowset wrote"},
		{"template without --force on a workbook", func(t *testing.T, r string) { mustWrite(t, r+"/site.xlsx", "PK mine") },
			func(r string) []string { return []string{"template", r + "/site.xlsx"} }, "already exists"},
	} {
		t.Run(c.name, func(t *testing.T) {
			root := t.TempDir()
			if err := os.MkdirAll(root+"/p/site", 0o755); err != nil {
				t.Fatal(err)
			}
			copySite(t, "demo", root+"/p/site")
			if c.setup != nil {
				c.setup(t, root)
			}
			before := world(t, root)
			args := c.args(root)
			code, _, errs := run(t, append(args, "--quiet")[:len(args)+boolInt(args[0] != "template")]...)
			if code != ExitUsage || !strings.Contains(errs, c.want) {
				t.Errorf("flowset %q: exit %d, stderr:\n%s\nwant exit 2 saying %q", args, code, errs, c.want)
			}
			for _, d := range diffWorld(before, world(t, root)) {
				t.Errorf("flowset %q: %s", args, d)
			}
		})
	}
}

func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}

// TestOutputReplaced checks what --force may replace: an output of flowset
// as it wrote it (files deleted from it do not matter), and a blank
// template nobody changed.
func TestOutputReplaced(t *testing.T) {
	root := t.TempDir()
	copySite(t, "plantroom", mkdir(t, root+"/site"))
	mustRun(t, "run", root+"/site", "--out", root+"/out", "--quiet")
	if err := os.Remove(root + "/out/report.html"); err != nil {
		t.Fatal(err)
	}
	mustRun(t, "run", root+"/site", "--out", root+"/out", "--quiet", "--force")
	if _, err := os.Stat(root + "/out/report.html"); err != nil {
		t.Errorf("--force did not write the new folder: %v", err)
	}
	mustRun(t, "template", root+"/blank")
	mustRun(t, "template", root+"/blank", "--force")
	mustRun(t, "template", root+"/blank.xlsx")
	mustRun(t, "template", root+"/blank.xlsx", "--force")
	entries, err := os.ReadDir(root)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			t.Errorf("%s left beside the outputs", e.Name())
		}
	}
}

func mkdir(t *testing.T, p string) string {
	t.Helper()
	if err := os.MkdirAll(p, 0o755); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestOutputConcurrent starts several runs to the same new folder at once:
// exactly one may write it; the others must stop with exit 2, and the
// folder must be the whole output of one run.
func TestOutputConcurrent(t *testing.T) {
	root := t.TempDir()
	copySite(t, "plantroom", mkdir(t, root+"/site"))
	const n = 4
	codes := make([]int, n)
	errs := make([]string, n)
	var wg sync.WaitGroup
	for i := range n {
		wg.Go(func() {
			var so, se bytes.Buffer
			codes[i] = RunIO(context.Background(), []string{"run", root + "/site", "--out", root + "/out", "--quiet"},
				&IO{In: strings.NewReader(""), Out: &so, Err: &se, Now: fixedClock})
			errs[i] = se.String()
		})
	}
	wg.Wait()
	ok := 0
	for i, c := range codes {
		switch c {
		case ExitOK:
			ok++
		case ExitUsage:
			if !strings.Contains(errs[i], "another flowset run is writing it") && !strings.Contains(errs[i], "already exists") {
				t.Errorf("run %d: exit 2 saying %q", i, errs[i])
			}
		default:
			t.Errorf("run %d: exit %d: %s", i, c, errs[i])
		}
	}
	if ok != 1 {
		t.Errorf("%d runs wrote the folder, want exactly 1", ok)
	}
	if err := untouched("out", root+"/out", mustLstat(t, root+"/out")); err != nil {
		t.Errorf("the folder is not one run's whole output: %v", err)
	}
}

func mustLstat(t *testing.T, p string) fs.FileInfo {
	t.Helper()
	fi, err := os.Lstat(p)
	if err != nil {
		t.Fatal(err)
	}
	return fi
}

// TestOutputStale leaves what a killed run leaves beside its output (a
// temporary folder half written, a replaced folder not yet removed, its
// lock file) and checks the next run to the same place cleans them up,
// and that a cancelled run leaves nothing.
func TestOutputStale(t *testing.T) {
	root := t.TempDir()
	copySite(t, "plantroom", mkdir(t, root+"/site"))
	mustWrite(t, root+"/.out.tmp-123456/calibration.csv", "half")
	mustWrite(t, root+"/.out.tmp-99.old/report.html", "old")
	mustWrite(t, root+"/.out.flowset-lock", "")
	mustWrite(t, root+"/.outer.tmp-1/keep", "not ours")
	mustRun(t, "run", root+"/site", "--out", root+"/out", "--quiet")
	for _, p := range []string{".out.tmp-123456", ".out.tmp-99.old", ".out.flowset-lock"} {
		if _, err := os.Lstat(filepath.Join(root, p)); err == nil {
			t.Errorf("%s left behind", p)
		}
	}
	if _, err := os.Stat(root + "/.outer.tmp-1/keep"); err != nil {
		t.Errorf("a temporary of another output was removed: %v", err)
	}

	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	var so, se bytes.Buffer
	code := RunIO(ctx, []string{"run", root + "/site", "--out", root + "/new/deeper/out", "--quiet"}, &IO{In: strings.NewReader(""), Out: &so, Err: &se, Now: fixedClock})
	if code != ExitCancelled {
		t.Errorf("cancelled run: exit %d, want %d: %s", code, ExitCancelled, se.String())
	}
	if _, err := os.Lstat(root + "/new"); err == nil {
		t.Error("a cancelled run left the parent folders it made")
	}
}
