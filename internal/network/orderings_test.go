package network

import (
	"math"
	"testing"
)

// TestOrderingsShared builds networks of one main of risers at other
// resistances and source pressures, and one of another shape, sharing one
// Orderings: the networks of the same nodes and links take the first one's
// ordering, the other works out its own, and every solve is the same to the
// bit as on a network ordering its nodes itself (no outside source: an
// ordering is a function of the topology alone, checked here on its
// results).
func TestOrderingsShared(t *testing.T) {
	var o Orderings
	for _, c := range []struct {
		name  string
		nr    int
		seed  uint64
		diff  float64
		taken bool
	}{
		{"first", 12, 3, 200e3, false},
		{"other resistances", 12, 4, 200e3, true},
		{"other source", 12, 5, 90e3, true},
		{"another shape", 13, 3, 200e3, false},
		{"the first shape again", 12, 6, 150e3, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			l := risersLadder(c.nr, 30, c.seed)
			bs, err := Build(l, Source{Differential: c.diff}, water20)
			if err != nil {
				t.Fatal(err)
			}
			before := len(o.plans)
			bs.Net.ShareOrderings(&o)
			shared := mustSolve(t, bs.Net, nil)
			if taken := len(o.plans) == before; taken != c.taken {
				t.Errorf("ordering taken from the others: %v, want %v (%d kept, %d before)", taken, c.taken, len(o.plans), before)
			}
			bo, err := Build(l, Source{Differential: c.diff}, water20)
			if err != nil {
				t.Fatal(err)
			}
			own := mustSolve(t, bo.Net, nil)
			if shared.Iterations != own.Iterations {
				t.Errorf("iterations %d shared, %d own", shared.Iterations, own.Iterations)
			}
			for i := range own.Flow {
				if math.Float64bits(shared.Flow[i]) != math.Float64bits(own.Flow[i]) {
					t.Fatalf("link %d: flow %v shared, %v own", i, shared.Flow[i], own.Flow[i])
				}
			}
			for i := range own.Pressure {
				if math.Float64bits(shared.Pressure[i]) != math.Float64bits(own.Pressure[i]) {
					t.Fatalf("node %d: pressure %v shared, %v own", i, shared.Pressure[i], own.Pressure[i])
				}
			}
		})
	}
}

// TestOrderingsBounded keeps at most maxOrderings, the last ones.
func TestOrderingsBounded(t *testing.T) {
	var o Orderings
	for nr := 2; nr < 2+maxOrderings+3; nr++ {
		b, err := Build(risersLadder(nr, 3, 1), Source{Differential: 100e3}, water20)
		if err != nil {
			t.Fatal(err)
		}
		b.Net.ShareOrderings(&o)
		mustSolve(t, b.Net, nil)
	}
	if len(o.plans) != maxOrderings {
		t.Fatalf("%d orderings kept, want %d", len(o.plans), maxOrderings)
	}
	if got, want := len(o.plans[maxOrderings-1].pos), len(o.plans[maxOrderings-2].pos); got <= want {
		t.Errorf("the last ordering kept has %d nodes, the one before %d: not the last added", got, want)
	}
}

// TestSensitivitiesAtSameBits checks SensitivitiesAt against
// SensitivityFlows, one right-hand side at a time, to the bit, on a main of
// long risers (sparse factor, four solves side by side and a remainder)
// and on a small ladder (band factor); links not asked for are left as
// they were. No outside source: the same equations by the same operations
// (SensitivityFlows is checked against finite differences elsewhere).
func TestSensitivitiesAtSameBits(t *testing.T) {
	for _, c := range []struct {
		name   string
		nr, nt int
		sparse bool
	}{{"risers, sparse", 12, 30, true}, {"small, band", 3, 4, false}} {
		t.Run(c.name, func(t *testing.T) {
			b, err := Build(risersLadder(c.nr, c.nt, 9), Source{Differential: 150e3}, water20)
			if err != nil {
				t.Fatal(err)
			}
			sol := mustSolve(t, b.Net, nil)
			if got := sol.pl.sp != nil; got != c.sparse {
				t.Fatalf("sparse factor %v, want %v", got, c.sparse)
			}
			nl, nn := b.Net.NumLinks(), b.Net.NumNodes()
			var links []int
			for l := 0; l < nl; l += 3 {
				links = append(links, l)
			}
			for _, k := range []int{1, 4, 7, 9} {
				dh, dq, scr := make([][]float64, k), make([][]float64, k), make([][]float64, k)
				for j := range k {
					dh[j], dq[j], scr[j] = make([]float64, nl), make([]float64, nl), make([]float64, nn)
					dh[j][(j*37)%nl] = 1e3 * float64(j+1)
					dh[j][(j*101+5)%nl] = -250
					for l := range dq[j] {
						dq[j][l] = 42
					}
				}
				if err := sol.SensitivitiesAt(dh, dq, scr, links); err != nil {
					t.Fatal(err)
				}
				asked := map[int]bool{}
				for _, l := range links {
					asked[l] = true
				}
				for j := range k {
					want := make([]float64, nl)
					if err := sol.SensitivityFlows(dh[j], want, make([]float64, nn)); err != nil {
						t.Fatal(err)
					}
					for l := range nl {
						switch {
						case asked[l] && math.Float64bits(dq[j][l]) != math.Float64bits(want[l]):
							t.Fatalf("%d at once, right-hand side %d, link %d: %v, one alone %v", k, j, l, dq[j][l], want[l])
						case !asked[l] && dq[j][l] != 42:
							t.Fatalf("%d at once, right-hand side %d: link %d not asked for was written", k, j, l)
						}
					}
				}
			}
		})
	}
}

// TestSensitivityIntoNSameBits checks SensitivityIntoN and
// SensitivityTIntoN against SensitivityInto and SensitivityTInto, one at a
// time, to the bit (sparse factor: groups of four and a remainder; band
// factor), the adjoint with and without pressure weights. No outside
// source: the same equations by the same operations.
func TestSensitivityIntoNSameBits(t *testing.T) {
	for _, c := range []struct {
		name   string
		nr, nt int
	}{{"risers, sparse", 12, 30}, {"small, band", 3, 4}} {
		t.Run(c.name, func(t *testing.T) {
			b, err := Build(risersLadder(c.nr, c.nt, 11), Source{Differential: 150e3}, water20)
			if err != nil {
				t.Fatal(err)
			}
			sol := mustSolve(t, b.Net, nil)
			nl, nn := b.Net.NumLinks(), b.Net.NumNodes()
			same := func(what string, k int, got, want []float64) {
				t.Helper()
				for i := range want {
					if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
						t.Fatalf("%s %d, entry %d: %v at once, %v alone", what, k, i, got[i], want[i])
					}
				}
			}
			for _, n := range []int{1, 4, 6} {
				mk := func() [][]float64 {
					out := make([][]float64, n)
					for k := range out {
						out[k] = make([]float64, nl)
					}
					return out
				}
				mkN := func() [][]float64 {
					out := make([][]float64, n)
					for k := range out {
						out[k] = make([]float64, nn)
					}
					return out
				}
				dh, dq, dp, x := mk(), mk(), mkN(), mkN()
				wq, wp, g := mk(), mkN(), mk()
				for k := range n {
					for i := range nl {
						dh[k][i] = math.Sin(float64(i*(k+1))) * 1e3
						wq[k][i] = math.Cos(float64(i+7*k)) * 1e-3
					}
					for i := range nn {
						wp[k][i] = math.Sin(float64(3*i+k)) * 1e-6
					}
				}
				if err := sol.SensitivityIntoN(dh, dq, dp, x); err != nil {
					t.Fatal(err)
				}
				for k := range n {
					q1, p1 := make([]float64, nl), make([]float64, nn)
					if err := sol.SensitivityInto(dh[k], q1, p1, make([]float64, nn)); err != nil {
						t.Fatal(err)
					}
					same("flows", k, dq[k], q1)
					same("pressures", k, dp[k], p1)
				}
				for _, withP := range []bool{true, false} {
					var wps [][]float64
					if withP {
						wps = wp
					}
					if err := sol.SensitivityTIntoN(wq, wps, g, x); err != nil {
						t.Fatal(err)
					}
					for k := range n {
						g1 := make([]float64, nl)
						var wp1 []float64
						if withP {
							wp1 = wp[k]
						}
						if err := sol.SensitivityTInto(wq[k], wp1, g1, make([]float64, nn)); err != nil {
							t.Fatal(err)
						}
						same("adjoint", k, g[k], g1)
					}
				}
			}
		})
	}
}
