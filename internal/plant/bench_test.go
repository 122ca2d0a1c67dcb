package plant_test

import (
	"context"
	"fmt"
	"math"
	"os"
	"testing"

	"flowset/internal/plant"
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
	for _, n := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			largeBench(b, n)
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
	for _, n := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			largeBench(b, n)
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

// BenchmarkSolveControlled solves the design state of a building of risers
// of about 30 terminals (synth's RiserTerminals) with no controllers, and
// with a differential controller on every riser (holding 80 % of what the
// riser sees, its valve taking a tenth of that wide open): each controller
// costs a solve of its span alone besides the whole network's.
func BenchmarkSolveControlled(b *testing.B) {
	for _, n := range []int{300, 1000} {
		s, _, err := synth.Generate(context.Background(), synth.Spec{Branches: n, Arrangement: site.DirectReturn, RiserTerminals: 30, Boundary: site.PumpCurve, Seed: 3})
		if err != nil {
			b.Fatal(err)
		}
		m, err := plant.New(s)
		if err != nil {
			b.Fatal(err)
		}
		plain, err := m.Solve(context.Background(), m.Design(), m.BaseState())
		if err != nil {
			b.Fatal(err)
		}
		cs := *s
		cs.Branches = append([]site.Branch(nil), s.Branches...)
		for i := range m.Branches {
			if m.Branches[i].Riser() {
				d, q := plain.BranchDiff(i), plain.Flow(i)
				cs.Branches[i].Controller = site.Controller{SetPoint: 0.8 * d, Kvs: 3600 * q / math.Sqrt(0.1*d/1e5)}
			}
		}
		mc, err := plant.New(&cs)
		if err != nil {
			b.Fatal(err)
		}
		for _, c := range []struct {
			name string
			m    *plant.Model
		}{{"none", m}, {"every riser", mc}} {
			b.Run(fmt.Sprintf("branches=%d/controllers=%s", n, c.name), func(b *testing.B) {
				st := c.m.BaseState()
				b.ReportAllocs()
				for b.Loop() {
					if _, err := c.m.Solve(context.Background(), c.m.Design(), st); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}
