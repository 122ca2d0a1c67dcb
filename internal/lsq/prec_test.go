package lsq

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestBlockPrecWorkersSame builds the block preconditioner of a local
// approximation with 600 groups of three parameters (five tasks of
// precChunk blocks) and a hub column, on one goroutine and on three, and
// wants the factor, the two triangular solves and diag(M⁻¹) equal to the
// bit (the reference is the one-goroutine build; no outside source is
// needed for an equality).
func TestBlockPrecWorkersSame(t *testing.T) {
	const groups, per = 600, 3
	n := groups*per + 1 // the last parameter is a hub in every row
	rng := rand.New(rand.NewPCG(3, 7))
	var rows, cols []int
	var vals []float64
	m := 0
	for g := range groups {
		for range 4 { // four readings per group, each on the group and the hub
			for a := range per {
				rows, cols, vals = append(rows, m), append(cols, g*per+a), append(vals, rng.NormFloat64())
			}
			rows, cols, vals = append(rows, m), append(cols, n-1), append(vals, rng.NormFloat64())
			m++
		}
	}
	w := make([]float64, m)
	for i := range w {
		w[i] = 0.5 + rng.Float64()
	}
	prec := make([]float64, n)
	for j := range prec {
		prec[j] = 0.1
	}
	build := func(workers int) *blockPrec {
		bp := newBlockPrec(n, rows, cols, vals, w, nil, workers)
		if !bp.set(1.3, prec, 0.01, prec) {
			t.Fatalf("workers %d: not positive definite", workers)
		}
		return bp
	}
	one, three := build(1), build(3)
	if len(one.blocks) != groups || len(one.hubs) != 1 {
		t.Fatalf("%d blocks and %d hubs, want %d and 1", len(one.blocks), len(one.hubs), groups)
	}
	same := func(what string, a, b []float64) {
		t.Helper()
		for i := range a {
			if math.Float64bits(a[i]) != math.Float64bits(b[i]) {
				t.Fatalf("%s[%d]: %v on one goroutine, %v on three", what, i, a[i], b[i])
			}
		}
	}
	for b := range one.chol {
		same("factor", one.chol[b], three.chol[b])
	}
	same("diag", one.gdiag, three.gdiag)
	v := make([]float64, n)
	for j := range v {
		v[j] = rng.NormFloat64()
	}
	lo1, lo3 := append([]float64(nil), v...), append([]float64(nil), v...)
	one.lowerSolveOn(lo1, 1)
	one.lowerSolveOn(lo3, 3)
	same("L⁻¹v", lo1, lo3)
	up1, up3 := append([]float64(nil), v...), append([]float64(nil), v...)
	one.upperSolveOn(up1, 1)
	one.upperSolveOn(up3, 3)
	same("L⁻ᵀv", up1, up3)
	same("diag(M⁻¹)", one.invDiag(), three.invDiag())
}
