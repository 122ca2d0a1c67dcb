package calibrate

import (
	"math"
	"math/rand/v2"
)

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
	// Preconditioner: the block one of the local approximation, whose
	// singles take Rademacher estimates of the squared column norms (as the
	// engine does); those alone without it.
	const probes = 16
	diag := make([]float64, n)
	rng := rand.New(rand.NewPCG(1, 2))
	u := make([]float64, m)
	t := make([]float64, n)
	for range probes {
		for i := range u {
			u[i] = math.Sqrt(res.Weight[i])
			if rng.Uint64()&1 == 1 {
				u[i] = -u[i]
			}
		}
		op.MulTransVec(t, u)
		for j, v := range t {
			diag[j] += v * v / probes
		}
	}
	precond := func(dst, r []float64) {
		for j := range dst {
			dst[j] = r[j] / (diag[j]/c + prec[j])
		}
	}
	for j := range diag {
		if !(diag[j]/c+prec[j] > 0) {
			return
		}
	}
	rows, cols, vals := op.ApproxJacobian()
	if bp := newBlockPrec(n, rows, cols, vals, res.Weight, diag); bp.set(c, prec, 0, nil) {
		precond = bp.solve
	}
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
