package lsq

import (
	"math"

	"flowset/internal/parallel"
)

// ExactOperator is a matrix-free problem whose Jacobian products and local
// approximation ExactVariances can use.
type ExactOperator interface {
	Problem
	Operator
	SparseApprox
}

// ExactVariances replaces the probed variances of the parameters cols in res
// by exact ones. It serves the parameters every observation depends on (a
// circuit's header and pump, say): their rows of the inverse information
// matrix carry most of its off-diagonal mass, where the stochastic diagonal
// estimate of VarProbed is worst. Each exact variance is e_jᵀ A⁻¹ e_j with
// A = JᵀWJ/c + P, from one preconditioned conjugate-gradient solve with the
// Jacobian products of op, which must have been evaluated at res.X. sigma
// holds the prior sd of every parameter (+Inf for none). Results other than
// VarProbed are left as they are. The solves run on up to workers
// goroutines when op is a Forker (0: runtime.GOMAXPROCS(0)), with the same
// results as on one.
func ExactVariances(op ExactOperator, res *Result, sigma []float64, cols []int, workers int) {
	if res.VarMethod != VarProbed {
		return
	}
	n, m := op.Dims()
	c := res.CovScale
	if !(c > 0) {
		c = 1
	}
	prec := make([]float64, n)
	for j, s := range sigma {
		if !math.IsInf(s, 1) {
			prec[j] = 1 / (s * s)
		}
	}
	workers = parallel.Workers(workers)
	precWorkers := workers
	if _, ok := op.(Forker); !ok {
		workers = 1
	}
	workers = min(workers, len(cols))
	applies := make([]func(dst, v []float64), max(workers, 1))
	for k := range applies {
		var o Operator = op
		if k > 0 {
			o = op.(Forker).Fork()
		}
		tm := make([]float64, m)
		applies[k] = func(dst, v []float64) {
			o.MulVec(tm, v)
			for i := range tm {
				tm[i] *= res.Weight[i] / c
			}
			o.MulTransVec(dst, tm)
			for j := range n {
				dst[j] += prec[j] * v[j]
			}
		}
	}
	// Preconditioner: the block one of the local approximation, with exact
	// norms for the columns it leaves out.
	rows, cs, vals := op.ApproxJacobian()
	bp := newBlockPrec(n, rows, cs, vals, res.Weight, nil, precWorkers)
	d := append([]float64(nil), bp.gdiag...)
	exactColumns(op, d, res.Weight, bp.hubs)
	bp.diagA = d
	if !bp.set(c, prec, 0, nil) {
		return
	}
	ys := make([][]float64, len(cols))
	parallel.For(workers, len(cols), func(wk, k int) {
		j := cols[k]
		if j < 0 || j >= n {
			return
		}
		e := make([]float64, n)
		e[j] = 1
		if y, ok := pcg(applies[wk], bp.solve, e, nil, 1e-10, 2*n+100); ok {
			ys[k] = y
		}
	})
	for k, j := range cols {
		y := ys[k]
		if y == nil || !(y[j] > 0) {
			continue
		}
		sd := math.Sqrt(y[j])
		res.Var[j], res.StdErr[j] = y[j], sd
		res.Lo95[j] = res.X[j] - res.TQuantile*sd
		res.Hi95[j] = res.X[j] + res.TQuantile*sd
		res.Determined[j] = prec[j] == 0 || sd < determinedAt/math.Sqrt(prec[j])
	}
}
