package calibrate

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"flowset/internal/cpuclock"
	"flowset/internal/plant"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// BenchmarkFit fits one survey state of an invented direct-return plant: a
// clamp-on flow on every branch and the pump differential, true resistance
// ratios drawn around design, normal reading errors. Above
// DefaultMatrixFreeAbove parameters the fit runs matrix-free.

func BenchmarkFit(b *testing.B) {
	ctx := context.Background()
	nan := math.NaN()
	for _, nb := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", nb), func(b *testing.B) {
			largeBench(b, nb)
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

// BenchmarkFitSurvey fits the survey of a generated site as the command-line
// job does (synth's default reading mix: clamp-on and valve-meter flows on
// half the branches each, valve differentials on half, branch differentials
// on a fifth, header and pump differentials and the total flow; one state,
// hidden fouled and free branches), valve hypothesis tests included.
func BenchmarkFitSurvey(b *testing.B) {
	ctx := context.Background()
	for _, nb := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", nb), func(b *testing.B) {
			largeBench(b, nb)
			s, _, err := synth.Generate(ctx, synth.Spec{Branches: nb, Arrangement: site.DirectReturn, Nested: true,
				Seed: 7, Fouled: 0.05, Free: 0.02, Noise: 1, States: 1})
			if err != nil {
				b.Fatal(err)
			}
			benchFit(b, mustModel(b, s))
		})
	}
}

// BenchmarkFitRisers fits the survey of a large building's generated site
// (risers of about 30 terminals on a direct-return main, 70 % of the flows by
// valve meter with the valve differential, 30 % by clamp-on, half the
// branches with a branch differential, 5 % of the terminals fouled; the
// site of the cli's BenchmarkRunRisers). 100,000 branches only with
// FLOWSET_BENCH_LARGE set and not under -short.
func BenchmarkFitRisers(b *testing.B) {
	ctx := context.Background()
	for _, nb := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", nb), func(b *testing.B) {
			largeBench(b, nb)
			s, _, err := synth.Generate(ctx, synth.Spec{Branches: nb, Arrangement: site.DirectReturn, RiserTerminals: 30,
				Seed: 7, Fouled: 0.05, Noise: 1, States: 1, Readings: synth.SurveyMix()})
			if err != nil {
				b.Fatal(err)
			}
			benchFit(b, mustModel(b, s))
		})
	}
}

// largeBench skips the 100,000-branch size unless FLOWSET_BENCH_LARGE is
// set (and not under -short): it takes minutes.
func largeBench(b *testing.B, n int) {
	if n >= 100000 && (testing.Short() || os.Getenv("FLOWSET_BENCH_LARGE") == "") {
		b.Skip("100,000 branches: set FLOWSET_BENCH_LARGE=1 (takes minutes)")
	}
}

// benchFit times Fit on m with the default options and reports its CPU
// time, network solves, steps, outliers and readings.
func benchFit(b *testing.B, m *plant.Model) {
	ctx := context.Background()
	var cal *Calibration
	var err error
	cpu := cpuclock.Start()
	for b.Loop() {
		if cal, err = Fit(ctx, m, nil); err != nil {
			b.Fatal(err)
		}
	}
	cpu.Report(b)
	b.ReportMetric(float64(cal.Solves), "solves")
	b.ReportMetric(float64(cal.Iterations), "steps")
	b.ReportMetric(float64(len(cal.Outliers())), "outliers")
	b.ReportMetric(float64(len(cal.Readings)), "readings")
}
