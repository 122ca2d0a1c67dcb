package cli

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestPressureIndependentSite runs the whole job and the curves on the
// example site on pressure-independent valves (surveys/clinic, built by
// synth.Ward): the console names the starved valves and the mis-limited one,
// says why the regulating branches' resistances are not determined, never
// calls the index's pressure-independent valve fully open, and the field
// sheet carries FCU-3's setting for 0.24 l/s at the fitted 0.8 of its table
// (the table's setting for 0.3 l/s, 7.5 steps).
func TestPressureIndependentSite(t *testing.T) {
	out := filepath.Join(t.TempDir(), "out")
	code, stdout, errs := run(t, "run", surveyDir("clinic"), "--out", out)
	if code != ExitOK {
		t.Fatalf("run clinic: exit %d:\n%s", code, errs)
	}
	flat := strings.Join(strings.Fields(stdout), " ") // the console wraps its lines
	for _, want := range []string{"valve-starved", "valve-off-flow", "not identifiable while the valve regulates", "pressure-independent, starved in as-found"} {
		if !strings.Contains(flat, want) {
			t.Errorf("console does not say %q:\n%s", want, stdout)
		}
	}
	for _, line := range strings.Split(stdout, "\n") {
		if strings.Contains(line, "PF20") && strings.Contains(line, "fully open") {
			t.Errorf("a pressure-independent valve is called fully open: %q", line)
		}
	}
	sheet, err := os.ReadFile(filepath.Join(out, "field-sheet.csv"))
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, line := range strings.Split(string(sheet), "\n") {
		if strings.Contains(line, "FCU-3,") && strings.Contains(line, "PF20") {
			found = strings.Contains(line, ",7.50,")
			if !found {
				t.Errorf("field sheet row for FCU-3 does not set 7.5 steps: %q", line)
			}
		}
	}
	if !found {
		t.Errorf("field sheet has no row for FCU-3:\n%s", sheet)
	}
	code, stdout, errs = run(t, "curves", surveyDir("clinic"))
	if code != ExitOK || !strings.Contains(stdout, "held") {
		t.Errorf("curves clinic: exit %d, no held flows:\n%s%s", code, stdout, errs)
	}
}
