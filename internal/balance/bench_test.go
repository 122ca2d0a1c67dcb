package balance

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"flowset/internal/cpuclock"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// largeBench skips the 100,000-branch size unless FLOWSET_BENCH_LARGE is
// set (and not under -short): it takes minutes with the other sizes.
func largeBench(b *testing.B, n int) {
	if n >= 100000 && (testing.Short() || os.Getenv("FLOWSET_BENCH_LARGE") == "") {
		b.Skip("100,000 branches: set FLOWSET_BENCH_LARGE=1")
	}
}

// BenchmarkCompute plans random direct-return plants with risers on a pump,
// smart rounding, from the exact plan to the re-solved, pump-set plan with
// energy figures. Without an uncertainty band (BenchmarkBand).
func BenchmarkCompute(b *testing.B) {
	for _, n := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			largeBench(b, n)
			rng := rand.New(rand.NewPCG(uint64(n), 1))
			s := randomSite(rng, genOpts{n: n, header: site.DirectReturn, risers: true, pump: true})
			m := withPump(b, s)
			p := randomParams(rng, m)
			p.PumpHead = 1.1
			ctx := context.Background()
			b.ReportAllocs()
			for b.Loop() {
				if _, err := Compute(ctx, m, p, &Options{Rounding: Smart}); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkExact is the exact plan alone (steps 1-3 of the package
// comment): the O(n) part.
func BenchmarkExact(b *testing.B) {
	for _, n := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			largeBench(b, n)
			rng := rand.New(rand.NewPCG(uint64(n), 1))
			s := randomSite(rng, genOpts{n: n, header: site.DirectReturn, risers: true})
			m := mustModel(b, s)
			p := randomParams(rng, m)
			q := make([]float64, len(m.Branches))
			b.ReportAllocs()
			for b.Loop() {
				for i, br := range m.Branches {
					q[i] = br.Target
				}
				if _, err := newExact(m, p, q); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkBand is the uncertainty band alone (flowSD) on a generated
// building (risers of about 30 terminals on a direct-return main, a pump)
// at its design state, with every resistance and Kv scale uncertain (the
// spreads of TestBandEstimated): linear in the branches above
// bandExactMax uncertain parameters.
func BenchmarkBand(b *testing.B) {
	ctx := context.Background()
	for _, n := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			largeBench(b, n)
			s, _, err := synth.Generate(ctx, synth.Spec{Branches: n, Arrangement: site.DirectReturn, RiserTerminals: 30,
				Seed: 7, Fouled: 0.05, Noise: 1, States: 1, Readings: synth.SurveyMix()})
			if err != nil {
				b.Fatal(err)
			}
			m := mustModel(b, s)
			nb := len(m.Branches)
			rng := rand.New(rand.NewPCG(3, 5))
			u := &Uncertainty{LnResistance: make([]float64, nb), LnKvScale: make([]float64, nb), LnHeader: 0.1, LnPumpHead: 0.03}
			for i := range nb {
				u.LnResistance[i], u.LnKvScale[i] = 0.05+0.1*rng.Float64(), 0.03+0.27*rng.Float64()
				if rng.IntN(5) == 0 {
					u.LnResistance[i] = math.Ln2
				}
			}
			p := m.Design()
			sol, err := m.Solve(ctx, p, m.BaseState())
			if err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			cpu := cpuclock.Start()
			for b.Loop() {
				if _, err := flowSD(m, p, u, sol); err != nil {
					b.Fatal(err)
				}
			}
			cpu.Report(b)
		})
	}
}

// BenchmarkRankReadings ranks the readings after setting on random
// direct-return plants with risers on a pump, every resistance and Kv scale
// uncertain, listing a third of the branches (as the command line does).
// Its cost is the sensitivities (one solve per uncertain parameter) and the
// dense covariance of at most 300 followed branches.
func BenchmarkRankReadings(b *testing.B) {
	ctx := context.Background()
	for _, n := range []int{100, 1000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(uint64(n), 3))
			s := randomSite(rng, genOpts{n: n, header: site.DirectReturn, risers: true, pump: true})
			m := withPump(b, s)
			p := randomParams(rng, m)
			u := &Uncertainty{LnResistance: make([]float64, len(m.Branches)), LnKvScale: make([]float64, len(m.Branches)), LnHeader: 0.05, LnPumpHead: 0.03}
			for i := range u.LnResistance {
				u.LnResistance[i], u.LnKvScale[i] = 0.1, 0.03
			}
			plan, err := Compute(ctx, m, p, &Options{Rounding: Smart, Uncertainty: u})
			if err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			cpu := cpuclock.Start()
			for b.Loop() {
				if _, err := RankReadings(ctx, m, p, plan, &ReadOptions{Uncertainty: u, Max: (n + 2) / 3}); err != nil {
					b.Fatal(err)
				}
			}
			cpu.Report(b)
		})
	}
}
