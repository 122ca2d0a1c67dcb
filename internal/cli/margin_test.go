package cli

import (
	"math"
	"testing"

	"flowset/internal/balance"
	"flowset/internal/calibrate"
)

// TestIndexMargin checks the index circuit's margin: half the rise of the
// least differential at the end of the most important parameter's band,
// turned into flow by the square law (q ∝ √Δp), capped, and none without a
// fit or for a short plan.
func TestIndexMargin(t *testing.T) {
	plan := func(least, high float64, unmet int) *balance.Plan {
		p := &balance.Plan{Index: "B7", Least: least, LeastHigh: high,
			Branches: []balance.BranchPlan{{ID: "B1", Target: 1e-3}, {ID: "B7", Target: 2e-3}}}
		for range unmet {
			p.Unmet = append(p.Unmet, balance.Shortfall{ID: "B1"})
		}
		return p
	}
	fitted := &job{Cal: &calibrate.Calibration{}, opts: &jobOptions{Scale: 1}}
	for _, c := range []struct {
		name string
		j    *job
		p    *balance.Plan
		want float64 // fraction of the index's target
	}{
		{"small spread", fitted, plan(100e3, 102e3, 0), math.Sqrt(1.01) - 1},
		{"capped", fitted, plan(100e3, 150e3, 0), maxIndexMargin},
		{"negligible", fitted, plan(100e3, 100.2e3, 0), 0},
		{"design only", &job{opts: &jobOptions{Scale: 1}}, plan(100e3, 120e3, 0), 0},
		{"short plan", fitted, plan(100e3, 120e3, 1), 0},
		{"scaled targets", &job{Cal: &calibrate.Calibration{}, opts: &jobOptions{Scale: 0.9}}, plan(100e3, 120e3, 0), 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			id, q, f := indexMargin(c.j, c.p)
			if math.Abs(f-c.want) > 1e-12 {
				t.Fatalf("margin %.6f, want %.6f", f, c.want)
			}
			if f > 0 && (id != "B7" || math.Abs(q-2e-3*(1+f)) > 1e-15) {
				t.Errorf("raised target %s %g, want B7 %g", id, q, 2e-3*(1+f))
			}
		})
	}
}
