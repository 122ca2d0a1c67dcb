package plant_test

import (
	"context"
	"fmt"
	"testing"

	"flowset/internal/plant"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// benchSite is a generated direct-return site on a pump curve, pipes and
// headers from the catalogue, balancing valves from tables.
func benchSite(b *testing.B, n int) *site.Site {
	s, _, err := synth.Generate(context.Background(), synth.Spec{Branches: n, Arrangement: site.DirectReturn, Boundary: site.PumpCurve, Seed: 1})
	if err != nil {
		b.Fatal(err)
	}
	return s
}

// BenchmarkNew builds the model of a site from its sheets.
func BenchmarkNew(b *testing.B) {
	for _, n := range []int{100, 1000, 10000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			s := benchSite(b, n)
			b.ReportAllocs()
			for b.Loop() {
				if _, err := plant.New(s); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkSolve builds and cold-solves the network of the design state,
// as a first look at a site does.
func BenchmarkSolve(b *testing.B) {
	for _, n := range []int{100, 1000, 10000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			m, err := plant.New(benchSite(b, n))
			if err != nil {
				b.Fatal(err)
			}
			st := m.BaseState()
			b.ReportAllocs()
			for b.Loop() {
				if _, err := m.Solve(context.Background(), m.Design(), st); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
