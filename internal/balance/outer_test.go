package balance

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestOuterRowsSameBits checks that RankReadings' product on the rows that
// do not repeat, spread to the clamp-on rows, has every bit of the full
// product a aᵀ (gonum's SymOuterK on every row), with its rows shared
// among workers or not, and without the shortcut (readings in another
// state).
func TestOuterRowsSameBits(t *testing.T) {
	for _, tc := range []struct {
		name         string
		nf, tail, nc int
	}{
		{"one branch", 1, 2, 3},
		{"odd sizes", 7, 5, 13},
		{"no tail", 4, 0, 9},
		{"wide", 20, 12, 101},
	} {
		for _, same := range []bool{true, false} {
			for _, workers := range []int{1, 3} {
				t.Run(fmt.Sprintf("%s/same=%v/workers=%d", tc.name, same, workers), func(t *testing.T) {
					rng := rand.New(rand.NewPCG(3, uint64(tc.nf)))
					nr := 3*tc.nf + tc.tail
					a := mat.NewDense(nr, tc.nc, nil)
					for x := range nr {
						for y := range tc.nc {
							a.Set(x, y, rng.NormFloat64()*1e-3)
						}
					}
					for k := range tc.nf { // clamp-on rows repeat the flow rows
						a.SetRow(2*tc.nf+k, a.RawRowView(k)[:tc.nc])
					}
					// A zero row gives exact zeros (+0 in gonum's sum).
					if tc.tail > 0 {
						a.SetRow(nr-1, make([]float64, tc.nc))
					}
					var kk mat.SymDense
					kk.SymOuterK(1, a)
					want := mat.DenseCopyOf(&kk)
					got := outerRows(a, tc.nf, same, workers)
					for x := range nr {
						for y := range nr {
							if g, w := got.At(x, y), want.At(x, y); math.Float64bits(g) != math.Float64bits(w) {
								t.Fatalf("entry (%d, %d) = %v, full product %v", x, y, g, w)
							}
						}
					}
				})
			}
		}
	}
}
