package lsq_test

import (
	"context"
	"testing"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"

	"flowset/internal/lsq"
	"flowset/internal/lsq/lsqtest"
)

// blockSparse is lsqtest.Sparse with a local approximation
// (SparseApprox): its Jacobian at x = 0, which has the true one's pattern,
// so that Solve builds the block preconditioner and probes with it.
type blockSparse struct{ *lsqtest.Sparse }

func (b blockSparse) ApproxJacobian() (rows, cols []int, vals []float64) {
	for i, idx := range b.Idx {
		for k, j := range idx {
			rows = append(rows, i)
			cols = append(cols, j)
			vals = append(vals, b.Coef[i][k]/b.Sigma[i])
		}
	}
	return rows, cols, vals
}

// TestWorkersSame solves the same problems on one, two and three
// goroutines (Settings.Workers) and wants the results equal to the bit:
// the variance probes (adaptive and fixed in number, a number that is not
// a multiple of the batch, the warm second round of a scaled covariance)
// and the block preconditioner's sums are split over the goroutines, and
// must combine in the same order as on one. Nothing outside the project is
// needed: the reference is the one-goroutine run.
func TestWorkersSame(t *testing.T) {
	const n = 300
	x0 := make([]float64, n)
	prior := flatPrior(n, 1)
	for _, tc := range []struct {
		name   string
		block  bool
		probes int
		sigma  float64
	}{
		{"diagonal, adaptive", false, 0, 1},
		{"diagonal, 20 probes, scaled", false, 20, 0.5},
		{"block, adaptive", true, 0, 1},
		{"block, 13 probes, scaled", true, 13, 0.5},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var results []*lsq.Result
			for _, w := range []int{1, 2, 3} {
				sp := lsqtest.NewSparse(n, 2*n, 3, 0.03, 8)
				for i := range sp.Sigma {
					sp.Sigma[i] *= tc.sigma
				}
				var p lsq.Problem = sp
				if tc.block {
					p = blockSparse{sp}
				}
				res, err := lsq.Solve(context.Background(), p, x0, prior,
					&lsq.Settings{DenseCovMax: -1, Probes: tc.probes, OutlierZ: -1, Seed: 1, Workers: w})
				if err != nil {
					t.Fatalf("workers %d: %v", w, err)
				}
				if res.VarMethod != lsq.VarProbed {
					t.Fatalf("workers %d: VarMethod %v, want probed", w, res.VarMethod)
				}
				results = append(results, res)
			}
			for k, res := range results[1:] {
				if d := cmp.Diff(results[0], res, cmpopts.EquateNaNs()); d != "" {
					t.Errorf("workers %d differ from 1 (-1 +%d):\n%s", k+2, k+2, d)
				}
			}
			if tc.sigma < 1 && !(results[0].CovScale > 1) {
				t.Errorf("CovScale %v: the scaled (warm) round did not run", results[0].CovScale)
			}
		})
	}
}
