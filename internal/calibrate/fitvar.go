package calibrate

import "math"

// exactHubVariances replaces the probed variances of the header and pump
// parameters by exact ones. Every reading depends on those two, so their
// rows of the inverse information matrix carry most of its off-diagonal
// mass, where the stochastic diagonal estimate is worst (measured on a
// 1000-branch ladder: header and pump sd over-estimated 2-2.6 times while
// the branch resistances were within a few per cent on average). Each exact
// variance is e_jᵀ A⁻¹ e_j with A = JᵀWJ/c + P, from one preconditioned
// conjugate-gradient solve (pcg) with the Jacobian products of the problem
// at res.X; p must have been evaluated there.
func exactHubVariances(p *problem, res *Result) {
	if res.VarMethod != VarProbed {
		return
	}
	op := opProblem{p}
	n, m := p.Dims()
	c := res.CovScale
	if !(c > 0) {
		c = 1
	}
	prec := make([]float64, n)
	for j, par := range p.params {
		if !math.IsInf(par.Sigma, 1) {
			prec[j] = 1 / (par.Sigma * par.Sigma)
		}
	}
	tm := make([]float64, m)
	apply := func(dst, v []float64) {
		op.MulVec(tm, v)
		for i := range tm {
			tm[i] *= res.Weight[i] / c
		}
		op.MulTransVec(dst, tm)
		for j := range n {
			dst[j] += prec[j] * v[j]
		}
	}
	// Preconditioner: the block one of the local approximation, with exact
	// norms for the columns it leaves out (the header and pump themselves).
	rows, cols, vals := op.ApproxJacobian()
	bp := newBlockPrec(n, rows, cols, vals, res.Weight, nil)
	d := append([]float64(nil), bp.gdiag...)
	exactColumns(op, d, res.Weight, bp.hubs)
	bp.diagA = d
	if !bp.set(c, prec, 0, nil) {
		return
	}
	precond := bp.solve
	for _, j := range []int{p.hIdx, p.pIdx} {
		if j < 0 {
			continue
		}
		e := make([]float64, n)
		e[j] = 1
		y, ok := pcg(apply, precond, e, nil, 1e-10, 2*n+100)
		if !ok || !(y[j] > 0) {
			continue
		}
		sd := math.Sqrt(y[j])
		res.Var[j], res.StdErr[j] = y[j], sd
		res.Lo95[j] = res.X[j] - res.TQuantile*sd
		res.Hi95[j] = res.X[j] + res.TQuantile*sd
		res.Determined[j] = prec[j] == 0 || sd < determinedAt/math.Sqrt(prec[j])
	}
}
