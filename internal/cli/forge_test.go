package cli

import (
	"archive/zip"
	"bytes"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// forged is a folder name that tries to forge what the terminal and the
// outputs show: a newline and a whole line of output, a terminal title
// escape, a colour escape, and a right-to-left override.
const forged = "site\nall checks passed\n\x1b]0;owned\x07\x1b[31mred\u202eevil\r"

// rawControls returns the unsafe characters (see unsafeRune) in text,
// newlines and tabs excepted.
func rawControls(text string) []rune {
	var out []rune
	for _, r := range text {
		if r != '\n' && r != '\t' && unsafeRune(r) {
			out = append(out, r)
		}
	}
	return out
}

// TestForgedPaths runs check, fit and run on a site whose folder (and the
// output folder) carry control sequences: nothing of them may reach the
// streams or the outputs raw, and no forged line may appear.
func TestForgedPaths(t *testing.T) {
	root := t.TempDir()
	dir := filepath.Join(root, forged)
	if err := os.Mkdir(dir, 0o755); err != nil {
		t.Skipf("this file system refuses the name: %v", err)
	}
	copySite(t, "plantroom", dir)
	out := filepath.Join(root, "out"+forged)
	for _, args := range [][]string{
		{"check", dir},
		{"fit", dir},
		{"run", dir, "--out", out, "--quiet"},
		{"run", dir, "--out", out, "--quiet"}, // exists: the refusal names it
		{"check", filepath.Join(dir, "nothing\x1b[2J")},
	} {
		code, stdout, stderr := run(t, args...)
		for name, text := range map[string]string{"stdout": stdout, "stderr": stderr} {
			if c := rawControls(text); len(c) > 0 {
				t.Errorf("flowset %q (exit %d): %s holds %q raw:\n%s", args, code, name, c, text)
			}
			for _, line := range strings.Split(text, "\n") {
				if strings.TrimSpace(line) == "all checks passed" {
					t.Errorf("flowset %q: %s holds a forged line", args, name)
				}
			}
		}
		if code != ExitOK && !strings.Contains(stdout+stderr, `\x1b`) {
			t.Errorf("flowset %q does not show the escape it was given, escaped:\n%s%s", args, stdout, stderr)
		}
	}
	err := filepath.WalkDir(out, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		texts := map[string]string{filepath.Base(p): string(b)}
		if strings.HasSuffix(p, ".xlsx") {
			delete(texts, filepath.Base(p)) // the archive itself is binary
			zr, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
			if err != nil {
				return err
			}
			for _, f := range zr.File {
				rc, _ := f.Open()
				x, _ := io.ReadAll(rc)
				rc.Close()
				texts[filepath.Base(p)+"/"+f.Name] = string(x)
			}
		}
		for name, text := range texts {
			if strings.HasSuffix(name, ".html") {
				text = reportData(text)
			}
			if c := rawControls(text); len(c) > 0 {
				t.Errorf("%s holds %q raw", name, c)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}
