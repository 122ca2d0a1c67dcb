package cli

import (
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
)

// TestDiskFull runs the whole job into a 200 KiB file system (made where
// the test may mount one, skipped elsewhere): the run must end with
// ExitSystem, say the disk is full, and leave nothing there.
func TestDiskFull(t *testing.T) {
	dir := t.TempDir()
	if err := syscall.Mount("tmpfs", dir, "tmpfs", 0, "size=200k"); err != nil {
		t.Skipf("cannot mount a small file system here: %v", err)
	}
	t.Cleanup(func() { syscall.Unmount(dir, 0) })
	code, _, errs := run(t, "run", surveyDir("demo"), "--out", filepath.Join(dir, "out"), "--quiet")
	if code != ExitSystem || !strings.Contains(errs, "no space left on device") {
		t.Errorf("run onto a full disk: exit %d, stderr:\n%s\nwant exit %d saying no space is left", code, errs, ExitSystem)
	}
	if entries, _ := os.ReadDir(dir); len(entries) != 0 {
		t.Errorf("a run that filled the disk left %v", entries)
	}
}
