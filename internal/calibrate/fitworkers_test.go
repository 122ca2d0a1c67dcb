package calibrate

import (
	"context"
	"testing"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"

	"flowset/internal/lsq"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// TestFitWorkersSame fits a generated building (risers of about 30
// terminals on a direct-return main, the survey mix of the large-site
// benchmarks, fouled terminals, reading noise: the matrix-free path with
// the local Jacobian, its block preconditioner, the probed variances and
// the exact header and pump variances) on one goroutine and on two and
// three (FitOptions.Workers), and wants every number of the calibration
// equal to the bit: the parallel parts split independent work (probes,
// columns of the local Jacobian, the preconditioner's sums by column) and
// gather it in the order one goroutine works in. The reference is the
// one-goroutine fit (no outside source is needed for an equality).
func TestFitWorkersSame(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a 400-branch site three times")
	}
	ctx := context.Background()
	s, _, err := synth.Generate(ctx, synth.Spec{Branches: 400, Arrangement: site.DirectReturn, RiserTerminals: 30,
		Seed: 7, Fouled: 0.05, Noise: 1, States: 1, Readings: synth.SurveyMix()})
	if err != nil {
		t.Fatal(err)
	}
	m := mustModel(t, s)
	var cals []*Calibration
	for _, w := range []int{1, 2, 3} {
		cal, err := Fit(ctx, m, &FitOptions{Workers: w})
		if err != nil {
			t.Fatalf("workers %d: %v", w, err)
		}
		if !cal.Result.MatrixFree || cal.Result.VarMethod != lsq.VarProbed {
			t.Fatalf("workers %d: matrix-free %v, variances %v; want the matrix-free path's probes", w, cal.Result.MatrixFree, cal.Result.VarMethod)
		}
		cals = append(cals, cal)
	}
	for k, cal := range cals[1:] {
		if d := cmp.Diff(cals[0], cal, cmpopts.EquateNaNs(), cmp.AllowUnexported(Param{})); d != "" {
			t.Errorf("workers %d differ from 1 (-1 +%d):\n%s", k+2, k+2, d)
		}
	}
}
