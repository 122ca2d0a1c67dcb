package network

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// risersLadder is a direct-return main of nr risers of nt terminals each,
// with header segments on the main and in every riser, resistances drawn
// from seed: the layout whose band is wide (about twice nt).
func risersLadder(nr, nt int, seed uint64) Ladder {
	rng := rand.New(rand.NewPCG(seed, 1))
	main := Ladder{Arrangement: DirectReturn}
	for r := range nr {
		sub := &Ladder{Arrangement: DirectReturn}
		for t := range nt {
			sub.Branches = append(sub.Branches, Branch{ID: fmt.Sprintf("R%d.%d", r, t),
				Elements: []Element{quad{1e10 * (1 + 4*rng.Float64())}},
				Supply:   []Element{quad{1e7 * (1 + rng.Float64())}}, Return: []Element{quad{1e7 * (1 + rng.Float64())}}})
		}
		main.Branches = append(main.Branches, Branch{ID: fmt.Sprintf("R%d", r), Elements: []Element{quad{1e6}}, Sub: sub,
			Supply: []Element{quad{1e5 * (1 + rng.Float64())}}, Return: []Element{quad{1e5 * (1 + rng.Float64())}}})
	}
	return main
}

// TestSparseFactorAgrees solves a main of long risers with the sparse
// factor prepare chooses for it and again with the band it replaces: the
// flows, pressures and a sensitivity must agree to rounding (the same
// equations, another elimination order). A check of the implementation
// against its own band code, the band being checked against LAPACK in
// band_test.go.
func TestSparseFactorAgrees(t *testing.T) {
	for _, c := range []struct {
		name   string
		nr, nt int
	}{{"12 risers of 30", 12, 30}, {"40 risers of 20", 40, 20}, {"25 risers of 40", 25, 40}} {
		t.Run(c.name, func(t *testing.T) {
			l := risersLadder(c.nr, c.nt, 3)
			bs, err := Build(l, Source{Differential: 200e3}, water20)
			if err != nil {
				t.Fatal(err)
			}
			sparse := mustSolve(t, bs.Net, nil)
			if bs.Net.plan.sp == nil {
				t.Fatalf("half bandwidth %d: the sparse factor was not chosen", bs.Net.plan.k)
			}
			bb, err := Build(l, Source{Differential: 200e3}, water20)
			if err != nil {
				t.Fatal(err)
			}
			if bb.Net.plan, err = bb.Net.newPlan(false); err != nil {
				t.Fatal(err)
			}
			band := mustSolve(t, bb.Net, nil)
			for i := range sparse.Flow {
				if d := math.Abs(sparse.Flow[i] - band.Flow[i]); d > 1e-9*math.Abs(band.Flow[i])+1e-15 {
					t.Fatalf("link %d: flow %.15g sparse, %.15g band", i, sparse.Flow[i], band.Flow[i])
				}
			}
			for i := range sparse.Pressure {
				if d := math.Abs(sparse.Pressure[i] - band.Pressure[i]); d > 1e-9*200e3 {
					t.Fatalf("node %d: pressure %.15g sparse, %.15g band", i, sparse.Pressure[i], band.Pressure[i])
				}
			}
			dh := make([]float64, len(sparse.Flow))
			dh[bs.Branch[fmt.Sprintf("R%d.%d", c.nr/2, c.nt/2)]] = 1e3
			qs, _, err := sparse.Sensitivity(dh)
			if err != nil {
				t.Fatal(err)
			}
			qb, _, err := band.Sensitivity(dh)
			if err != nil {
				t.Fatal(err)
			}
			var scale float64
			for _, q := range qb {
				scale = math.Max(scale, math.Abs(q))
			}
			for i := range qs {
				if math.Abs(qs[i]-qb[i]) > 1e-9*scale {
					t.Fatalf("link %d: sensitivity %.15g sparse, %.15g band", i, qs[i], qb[i])
				}
			}
		})
	}
}

// BenchmarkSolveRisers solves mains of risers of 30 terminals, where the
// sparse factor replaces a band of half bandwidth about 60 (factor=band:
// the band forced, as before the sparse factor).
func BenchmarkSolveRisers(b *testing.B) {
	for _, nr := range []int{33, 330} {
		for _, f := range []string{"sparse", "band"} {
			b.Run(fmt.Sprintf("branches=%d/factor=%s", nr*31, f), func(b *testing.B) {
				bt, err := Build(risersLadder(nr, 30, 1), Source{Differential: 200e3}, water20)
				if err != nil {
					b.Fatal(err)
				}
				if f == "band" {
					if bt.Net.plan, err = bt.Net.newPlan(false); err != nil {
						b.Fatal(err)
					}
				}
				for b.Loop() {
					if _, err := bt.Net.Solve(context.Background(), nil); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}
