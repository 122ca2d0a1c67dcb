package synth

import (
	"bytes"
	"context"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"flowset/internal/plant"
	"flowset/internal/site"
)

var update = flag.Bool("update", false, "rewrite the example sites in surveys/ from their descriptions")

// surveysDir is the repository's folder of example sites.
const surveysDir = "../../surveys"

// examples are the example sites and the functions that describe them.
// units is the unit set each site's sheets are written in.
func examples() []struct {
	dir   string
	make  func(context.Context) (*site.Site, *Truth, error)
	units site.SheetUnits
} {
	return []struct {
		dir   string
		make  func(context.Context) (*site.Site, *Truth, error)
		units site.SheetUnits
	}{{"demo", Demo, site.SheetsSI}, {"plantroom", Plantroom, site.SheetsSI}, {"clinic", Ward, site.SheetsSI},
		{"wing", Wing, site.SheetsUS}}
}

// TestDemoSite regenerates the example sites in memory and compares them
// byte for byte with the committed sheets, so the examples never drift from
// their descriptions. With -update it rewrites the sheets instead.
func TestDemoSite(t *testing.T) {
	for _, ex := range examples() {
		t.Run(ex.dir, func(t *testing.T) {
			s, _, err := ex.make(context.Background())
			if err != nil {
				t.Fatalf("%s: %v", ex.dir, err)
			}
			files := memFS{}
			if err := site.WriteDirIn(s, ex.units, files.create); err != nil {
				t.Fatalf("WriteDir: %v", err)
			}
			dir := filepath.Join(surveysDir, ex.dir)
			if *update {
				writeSheets(t, dir, files)
				return
			}
			var names []string
			for name, b := range files {
				names = append(names, name)
				got, err := os.ReadFile(filepath.Join(dir, name))
				if err != nil {
					t.Errorf("%v (run go test ./internal/synth -run TestDemoSite -update)", err)
					continue
				}
				if !bytes.Equal(got, b.Bytes()) {
					t.Errorf("%s/%s differs from what %s gives; run go test ./internal/synth -run TestDemoSite -update\n%s",
						ex.dir, name, ex.dir, firstDiff(got, b.Bytes()))
				}
			}
			for _, name := range csvFiles(t, dir) {
				if !slices.Contains(names, name) {
					t.Errorf("%s/%s is not made by the description", ex.dir, name)
				}
			}
		})
	}
}

func csvFiles(t *testing.T, dir string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil && !os.IsNotExist(err) {
		t.Fatal(err)
	}
	var out []string
	for _, e := range ents {
		if strings.HasSuffix(e.Name(), ".csv") {
			out = append(out, e.Name())
		}
	}
	return out
}

func writeSheets(t *testing.T, dir string, files memFS) {
	t.Helper()
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	for _, name := range csvFiles(t, dir) {
		if _, ok := files[name]; !ok {
			if err := os.Remove(filepath.Join(dir, name)); err != nil {
				t.Fatal(err)
			}
		}
	}
	for name, b := range files {
		if err := os.WriteFile(filepath.Join(dir, name), b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// firstDiff shows the first line where got and want differ.
func firstDiff(got, want []byte) string {
	g, w := strings.Split(string(got), "\n"), strings.Split(string(want), "\n")
	for i := range max(len(g), len(w)) {
		var a, b string
		if i < len(g) {
			a = g[i]
		}
		if i < len(w) {
			b = w[i]
		}
		if a != b {
			return fmt.Sprintf("line %d:\n  committed: %s\n  generated: %s", i+1, a, b)
		}
	}
	return ""
}

// TestExampleSites reads the committed example sheets as the program does:
// no problem of error severity, a model that builds and solves in every
// survey state, and readings that the hidden truth explains within four
// standard uncertainties each (they are the truth plus noise of one).
func TestExampleSites(t *testing.T) {
	fsys := os.DirFS(surveysDir)
	for _, ex := range examples() {
		t.Run(ex.dir, func(t *testing.T) {
			s, probs, err := site.ReadDir(fsys, ex.dir)
			if err != nil {
				t.Fatalf("ReadDir(%s): %v\n%v", ex.dir, err, probs)
			}
			for _, p := range probs.Warnings() {
				t.Logf("warning: %v", p)
			}
			_, tr, err := ex.make(context.Background())
			if err != nil {
				t.Fatal(err)
			}
			m, err := plant.New(s)
			if err != nil {
				t.Fatalf("plant.New: %v", err)
			}
			if len(m.States) == 0 {
				t.Fatal("no survey states")
			}
			for _, st := range m.States {
				if _, err := m.Solve(context.Background(), m.Design(), st); err != nil {
					t.Errorf("Solve(design, %s): %v", st.Label, err)
				}
				sol, err := SimulateState(context.Background(), s, tr, st)
				if err != nil {
					t.Fatalf("Simulate(%s): %v", st.Label, err)
				}
				for _, ri := range st.Readings {
					r := &s.Readings[ri]
					want := expected(t, sol, st, r)
					if z := (r.Value - want) / r.Sigma; math.Abs(z) > 4 {
						t.Errorf("%s: %v at %s by %s = %g, truth %g: %.1f standard uncertainties off", st.Label, r.What, r.Where, r.Instrument, r.Value, want, z)
					}
				}
			}
		})
	}
}

// TestDemoStory checks that the demo tells the story its README promises:
// as found, the near branches over design and the far end short; the fouled
// AHU-2 short in both states; the mis-set RAD-2F far short, its valve meter
// reading several times its clamp-on flow; closing near valves and opening
// RAD-2F raise its flow.
func TestDemoStory(t *testing.T) {
	s, tr, err := Demo(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	ratio := make([]map[string]float64, len(m.States))
	for k, st := range m.States {
		sol, err := Simulate(context.Background(), s, tr, st.Settings)
		if err != nil {
			t.Fatal(err)
		}
		ratio[k] = map[string]float64{}
		for i, b := range m.Branches {
			ratio[k][b.ID] = sol.Flow(i) / b.Design
		}
	}
	checks := []struct {
		name   string
		state  int
		id     string
		lo, hi float64
	}{
		{"near AHU over", 0, "AHU-1", 1.2, 10},
		{"near calorifier over", 0, "CAL-1", 1.2, 10},
		{"near radiators over", 0, "RAD-GN", 1.2, 10},
		{"far library short", 0, "RAD-LIB", 0, 0.95},
		{"fouled AHU-2 short", 0, "AHU-2", 0, 0.9},
		{"fouled AHU-2 still short", 1, "AHU-2", 0, 0.92},
		{"mis-set RAD-2F far short", 0, "RAD-2F", 0, 0.5},
		{"RAD-2F better after opening", 1, "RAD-2F", 0.6, 0.95},
	}
	for _, c := range checks {
		if r := ratio[c.state][c.id]; r < c.lo || r > c.hi {
			t.Errorf("%s: %s at %.2f of design in state %d, want %g to %g", c.name, c.id, r, c.state+1, c.lo, c.hi)
		}
	}
	var meter, clamp float64
	for _, r := range s.Readings {
		if r.State == "as-found" && r.Where == "RAD-2F" && r.What == site.Flow {
			if r.Instrument == "valve-meter" {
				meter = r.Value
			} else {
				clamp = r.Value
			}
		}
	}
	if !(meter > 3*clamp) {
		t.Errorf("RAD-2F as found: valve meter %g, clamp-on %g; want the meter several times the clamp-on", meter, clamp)
	}
	i, _ := m.Index("RAD-2F")
	if tr.Faults[i] != MisSet || tr.ActualSetting[i] != 1.2 || s.Branches[i].Setting != 3 {
		t.Errorf("RAD-2F truth %q at %g recorded %g, want mis-set at 1.2 recorded 3", tr.Faults[i], tr.ActualSetting[i], s.Branches[i].Setting)
	}
	j, _ := m.Index("AHU-2")
	if tr.Faults[j] != Fouled || tr.Params.Resistance[j] != 3 {
		t.Errorf("AHU-2 truth %q ×%g, want fouled ×3", tr.Faults[j], tr.Params.Resistance[j])
	}
}
