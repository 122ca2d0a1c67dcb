package cli

import (
	"path/filepath"
	"strings"
	"testing"

	"flowset/internal/site"
)

// TestControllerEdges runs the whole job on controlled sites at their
// edges: targets the pump cannot serve (status 5, the plan says what is
// short and still sets the controller), a riser with nothing of its own
// (no pipe, no partner valve), a controller sensing the branches alone, and
// a set point the controller's range does not reach.
func TestControllerEdges(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the whole job")
	}
	for _, c := range []struct {
		name   string
		senses string
		edit   func(s *site.Site, k int)
		code   int
		want   []string
	}{
		{"targets beyond the pump", "", func(s *site.Site, k int) {
			s.Targets = map[string]float64{}
			for _, b := range s.Branches {
				s.Targets[b.ID] = 1.8 * b.DesignFlow
			}
		}, 5, []string{"differential controller", "that set point must rise"}},
		{"riser of nothing but its controller", "", func(s *site.Site, k int) {
			b := &s.Branches[k]
			b.PipeLength, b.FittingsK, b.Valve, b.Setting, b.TerminalDrop, b.ControlKvs = 0, 0, "", nan(), 0, 0
		}, 0, []string{"differential controller"}},
		{"sensing the branches alone", site.SensesBranches, nil, 0, []string{"(the branches below alone)", "differential controller"}},
		{"set point above its range", "", func(s *site.Site, k int) {
			s.Branches[k].Controller.Max = s.Branches[k].Controller.SetPoint * 1.01
		}, 0, []string{"above its highest set point", "fit a controller with a higher range"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			dir, _ := writeControlledSiteWith(t, 0, c.senses, c.edit)
			code, out, errs := run(t, "run", dir, "--out", filepath.Join(t.TempDir(), "job"))
			if _, chk, _ := run(t, "check", dir); !strings.Contains(chk, "differential controller on") {
				t.Errorf("check does not list the controller:\n%s", chk)
			} else {
				out += chk
			}
			if code, cur, errs := run(t, "curves", dir); code != 0 || !strings.Contains(cur, "holding") {
				t.Errorf("curves: status %d, the controller not holding as found:\n%s%s", code, cur, errs)
			}
			if code != c.code {
				t.Fatalf("status %d, want %d\nstdout %s\nstderr %s", code, c.code, out, errs)
			}
			flat := strings.Join(strings.Fields(out), " ") // the console wraps lines
			for _, w := range c.want {
				if !strings.Contains(flat, w) {
					t.Errorf("stdout lacks %q:\n%s", w, out)
				}
			}
		})
	}
}
