package calibrate

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"flowset/internal/site"
)

// BenchmarkFit fits one survey state of an invented direct-return plant: a
// clamp-on flow on every branch and the pump differential, true resistance
// ratios drawn around design, normal reading errors. Above
// DefaultMatrixFreeAbove parameters the fit runs matrix-free.

func BenchmarkFit(b *testing.B) {
	ctx := context.Background()
	nan := math.NaN()
	for _, nb := range []int{100, 1000, 10000} {
		b.Run(fmt.Sprintf("branches=%d", nb), func(b *testing.B) {
			s := newPlantSite(b, plantSpec{branches: nb, arrangement: site.DirectReturn, seed: 1})
			for _, br := range s.Branches {
				read(s, "as-found", br.ID, site.Flow, "clamp-on", nan)
			}
			read(s, "as-found", site.AtPump, site.PumpDiff, "manometer", nan)
			m := mustModel(b, s)
			tr := newTruth(m)
			rng := rand.New(rand.NewPCG(1, 1))
			for i := range tr.p.Resistance {
				tr.p.Resistance[i] = math.Exp(0.3 * rng.NormFloat64())
			}
			simulate(b, m, tr, rng, 1)
			var cal *Calibration
			for b.Loop() {
				var err error
				if cal, err = Fit(ctx, m, nil); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(cal.Solves), "solves")
			b.ReportMetric(float64(cal.Iterations), "steps")
			b.ReportMetric(cal.ReducedChiSquare, "chi2/dof")
		})
	}
}
