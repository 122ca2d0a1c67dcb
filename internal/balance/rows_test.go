package balance

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"

	"flowset/internal/hydraulics"
	"flowset/internal/site"
)

// nestedSite is a direct-return ladder a, R, b where R is a riser feeding
// R.1 and R.2 (invented numbers).
func nestedSite() *site.Site {
	leaf := func(id, parent string, q float64) site.Branch {
		return site.Branch{ID: id, Parent: parent, DesignFlow: q, PipeBore: 0.0209, PipeLength: 10, Roughness: hydraulics.RoughnessSteel,
			FittingsK: 4, TerminalDrop: 15e3, TerminalFlow: nan, Valve: "V20", Setting: 2, HeaderBore: 0.035, SupplyLength: 3, ReturnLength: 3}
	}
	r := leaf("R", "", 0.6e-3)
	r.TerminalDrop, r.Valve, r.Setting = 0, "V32", nan
	return &site.Site{
		Name: "nested", Fluid: "water", Temperature: 273.15 + 70, Header: site.DirectReturn,
		Boundary: site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 60e3, Sensor: site.AtPump},
		Branches: []site.Branch{leaf("a", "", 0.3e-3), r, leaf("b", "", 0.25e-3), leaf("R.1", "R", 0.35e-3), leaf("R.2", "R", 0.25e-3)},
		Valves:   testValves(), ToleranceLow: -0.1, ToleranceHigh: 0.1,
	}
}

// TestRows checks the field sheet: walk order (sub-branches before their
// riser, take-off order otherwise), one cell per header column, units in the
// headers, and the basis column.
func TestRows(t *testing.T) {
	m := mustModel(t, nestedSite())
	pl := mustCompute(t, m, m.Design(), nil)
	pl.DesignOnly = true
	header, rows := pl.Rows()
	var order []string
	for _, r := range rows {
		if len(r) != len(header) {
			t.Fatalf("row %q has %d cells, header %d", r[1], len(r), len(header))
		}
		order = append(order, r[1])
		if r[3] != "design data only" {
			t.Errorf("row %s: basis %q, want design data only", r[1], r[3])
		}
	}
	if d := cmp.Diff([]string{"a", "R.1", "R.2", "R", "b"}, order); d != "" {
		t.Errorf("walk order (-want +got):\n%s", d)
	}
	for _, h := range []string{"Target (l/s)", "Predicted (l/s)", "Check: valve differential (kPa)", "Kv required (m3/h at 1 bar)"} {
		if !strings.Contains(strings.Join(header, "|"), h) {
			t.Errorf("header %q missing from %q", h, header)
		}
	}
	// The riser's target is its sub-branches' sum.
	for _, b := range pl.Branches {
		if b.ID == "R" && math.Abs(b.Target-0.6e-3) > 1e-15 {
			t.Errorf("riser target %g, want 0.6e-3 (0.35 + 0.25 l/s)", b.Target)
		}
	}
	if s := pl.Summary(); !strings.Contains(s[0], "design data only") {
		t.Errorf("summary does not open with the design-only caution: %q", s[0])
	}
}

// TestSmartRounding compares the rounding modes on random plants with a
// coarse handwheel (half-turn steps): smart rounding must bring at least as
// many branches into the band in total, and its in-band claims hold (checked
// in TestProperties).
func TestSmartRounding(t *testing.T) {
	var nearest, smart, total int
	for seed := range uint64(8) {
		rng := rand.New(rand.NewPCG(seed, 31))
		s := randomSite(rng, genOpts{n: 6 + rng.IntN(15), header: site.Arrangement(seed % 3), risers: true})
		for i := range s.Valves {
			s.Valves[i].Step *= 5
			if s.Valves[i].Unit == "%" {
				s.Valves[i].Step = 10
			}
		}
		m := mustModel(t, s)
		p := randomParams(rng, m)
		a := mustCompute(t, m, p, &Options{Rounding: Nearest})
		b := mustCompute(t, m, p, &Options{Rounding: Smart})
		nearest += a.InTolerance()
		smart += b.InTolerance()
		total += len(a.Branches)
	}
	t.Logf("in tolerance with coarse handwheels: nearest %d, smart %d of %d", nearest, smart, total)
	if smart < nearest {
		t.Errorf("smart rounding brings %d branches into the band, nearest %d: want at least as many", smart, nearest)
	}
}
