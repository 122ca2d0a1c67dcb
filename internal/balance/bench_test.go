package balance

import (
	"context"
	"fmt"
	"math/rand/v2"
	"testing"

	"flowset/internal/site"
)

// BenchmarkCompute plans random direct-return plants with risers on a pump,
// smart rounding, from the exact plan to the re-solved, pump-set plan with
// energy figures. Without an uncertainty band (that adds one sensitivity
// solve per uncertain parameter).
func BenchmarkCompute(b *testing.B) {
	for _, n := range []int{100, 1000, 10000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
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
	for _, n := range []int{100, 1000, 10000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
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
