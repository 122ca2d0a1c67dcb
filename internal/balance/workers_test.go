package balance

import (
	"context"
	"fmt"
	"math/rand/v2"
	"testing"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"

	"flowset/internal/plant"
	"flowset/internal/site"
)

// TestWorkersSameResult checks that the plan (its band above all, exact or
// estimated)
// and the ranking of readings are the same, every number to the bit, with
// their independent solves and rows shared among several workers as one
// after another, on sites with and without a pump curve, ranked in the
// plan's state and in another (the clamp-on rows then formed apart).
func TestWorkersSameResult(t *testing.T) {
	ctx := context.Background()
	for _, tc := range []struct {
		name   string
		n      int
		header site.Arrangement
		pump   bool
		readAt bool
		// estimated: the band by random probes (flowSDEstimated), not
		// one sensitivity per parameter
		estimated bool
	}{
		{"direct return with a pump, read after setting", 60, site.DirectReturn, true, false, false},
		{"reverse return, read as found", 40, site.ReverseReturn, false, true, false},
		{"risers with a pump, read as found", 80, site.DirectReturn, true, true, false},
		{"risers with a pump, the band estimated", 80, site.DirectReturn, true, false, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(uint64(tc.n), 5))
			s := randomSite(rng, genOpts{n: tc.n, header: tc.header, risers: tc.n >= 80, pump: tc.pump})
			var m *plant.Model
			if tc.pump {
				m = withPump(t, s)
			} else {
				var err error
				if m, err = plant.New(s); err != nil {
					t.Fatal(err)
				}
			}
			p := randomParams(rng, m)
			n := len(m.Branches)
			u := &Uncertainty{LnResistance: make([]float64, n), LnKvScale: make([]float64, n), LnHeader: 0.04, LnPumpHead: 0.02}
			for i := range n {
				u.LnResistance[i], u.LnKvScale[i] = 0.02+0.2*rng.Float64(), 0.03*rng.Float64()
			}
			plans := map[int]*Plan{}
			ranks := map[int]*ReadPlan{}
			for _, workers := range []int{1, 2, 5} {
				o := &Options{Rounding: Smart, Uncertainty: u, Workers: workers}
				if tc.estimated {
					o.bandExactMax = -1
				}
				plan, err := Compute(ctx, m, p, o)
				if err != nil {
					t.Fatal(err)
				}
				ro := &ReadOptions{Uncertainty: u, Max: n / 2, Workers: workers}
				if tc.readAt {
					st := m.BaseState()
					ro.ReadAt = &st
				}
				rp, err := RankReadings(ctx, m, p, plan, ro)
				if err != nil {
					t.Fatal(err)
				}
				plans[workers], ranks[workers] = plan, rp
			}
			if !plans[1].Banded || len(ranks[1].Readings) == 0 {
				t.Fatalf("nothing to compare: banded %v, %d readings ranked", plans[1].Banded, len(ranks[1].Readings))
			}
			// Exact equality, NaN equal to NaN: a different order of
			// sums would move the last bits.
			opts := cmp.Options{cmpopts.EquateNaNs(), cmp.AllowUnexported(Plan{})}
			for _, workers := range []int{2, 5} {
				if d := cmp.Diff(plans[1], plans[workers], opts); d != "" {
					t.Errorf("plan with %d workers (-one +%d):\n%s", workers, workers, d)
				}
				if d := cmp.Diff(ranks[1], ranks[workers], opts); d != "" {
					t.Errorf("ranking with %d workers (-one +%d):\n%s", workers, workers, fmt.Sprint(d))
				}
			}
		})
	}
}
