package calibrate

import "flowset/internal/lsq"

// exactHubVariances replaces the probed variances of the header and pump
// parameters by exact ones (lsq.ExactVariances). Every reading depends on
// those two (measured on a 1000-branch ladder: header and pump sd
// over-estimated 2-2.6 times by the probes while the branch resistances were
// within a few per cent on average); p must have been evaluated at res.X.
func exactHubVariances(p *problem, res *lsq.Result) {
	sigma := make([]float64, len(p.params))
	for j, par := range p.params {
		sigma[j] = par.Sigma
	}
	lsq.ExactVariances(opProblem{p}, res, sigma, []int{p.hIdx, p.pIdx}, p.workers)
}
