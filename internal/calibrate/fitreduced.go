package calibrate

import (
	"context"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"

	"flowset/internal/lsq"
	"flowset/internal/network"
	"flowset/internal/plant"
)

// The reduced refit of one branch. A valve hypothesis on a large site frees
// the parameters of one branch and holds every other one (runLocal). Seen
// from the branch's link, the rest of the network is then a fixed nonlinear
// circuit whose response to the link's flow is, to first order, a Thévenin
// equivalent: the pressure difference across the link falls by Z per unit
// of extra flow through it, and every other flow and pressure moves in
// proportion, by the ratios one Sensitivity solve gives (Thévenin's theorem
// on the network linearised at the parent fit, as in the incremental
// analysis of Todini & Pilati's gradient method). The link itself stays
// exactly nonlinear: its drop at the new flow balances the linear rest, a
// scalar equation. The error is of second order in the change of the rest
// of the network, which a single branch of hundreds barely moves; it costs
// one sensitivity solve per state instead of a network solve per
// evaluation.

// thevenin is state-wise data of a reduced refit of branch br.
type thevenin struct {
	br     int
	l      int       // the branch's link, -1 without one
	q0, p0 []float64 // flows and pressures of the parent fit
	rq, rp []float64 // their change per unit of extra flow through l
	z      float64   // the rest of the network's resistance seen by l
	dp0    float64   // the pressure difference across l at the parent fit
	// at the latest evaluation
	slope float64 // d(drop)/dq of the link at its new flow
}

// runReduced is runLocal for branch i with the rest of the network
// linearised at fit from (see above).
func (su *setup) runReduced(ctx context.Context, hyp []ValveHypothesis, sel []int, from *fitRun, i int) (*fitRun, error) {
	par := from.prob
	if !slices.Equal(par.x, from.res.X) {
		r := make([]float64, len(par.obs))
		before := par.solves
		err := par.Residuals(from.res.X, r, nil)
		su.solves += par.solves - before
		if err != nil {
			return nil, fmt.Errorf("calibrate: re-evaluating the fit: %w", err)
		}
	}
	p := su.problemFor(ctx, hyp, sel)
	id := su.m.Branches[i].ID
	for k, psn := range par.states {
		sn := &stateNet{st: psn.st, built: psn.built, flowOf: psn.flowOf, supplyHdr: psn.supplyHdr, returnHdr: psn.returnHdr,
			top: psn.top, ret: psn.ret, outlet: psn.outlet, topFlow: psn.topFlow, valves: slices.Clone(psn.valves)}
		for oi, o := range p.obs {
			if o.state == k {
				sn.obs = append(sn.obs, oi)
			}
		}
		th := &thevenin{br: i, l: -1}
		sol := psn.sol
		if sol == nil {
			return nil, fmt.Errorf("calibrate: state %q was not solved", psn.st.Label)
		}
		th.q0, th.p0 = sol.Flow, sol.Pressure
		if l := psn.built.Branch[id]; l >= 0 && len(sn.obs) > 0 {
			dh := make([]float64, len(sol.Flow))
			dh[l] = 1
			dq, dp, err := sol.Sensitivity(dh)
			if err != nil {
				return nil, fmt.Errorf("calibrate: state %q: %w", psn.st.Label, err)
			}
			g := dq[l] // -1/(d_l + Z)
			if !(g < 0) {
				return nil, fmt.Errorf("calibrate: state %q: link %q does not respond to its drop: %w", psn.st.Label, id, lsq.ErrDomain)
			}
			th.l = l
			th.rq, th.rp = dq, dp
			for j := range dq {
				dq[j] /= g
			}
			for j := range dp {
				dp[j] /= g
			}
			th.z = max(-1/g-linkSlope(sol, l), 0)
			th.dp0 = sol.Drop[l]
		}
		sn.th = th
		p.states = append(p.states, sn)
	}
	p.restrict(i, from)
	n := len(p.params)
	x0 := make([]float64, n)
	prior := &lsq.Prior{Mean: make([]float64, n), Sigma: make([]float64, n)}
	for j, par := range p.params {
		prior.Sigma[j] = par.Sigma
		x0[j] = su.start(from, par)
	}
	set := &lsq.Settings{MaxIter: su.opt.MaxIter, Loss: su.opt.Loss, OutlierZ: -1, EstimateOnly: true, Dense: true, CostTol: fitCostTol}
	res, err := lsq.Solve(ctx, p, x0, prior, set)
	if err != nil {
		return nil, fmt.Errorf("calibrate: fit: %w", err)
	}
	return &fitRun{hyp: hyp, sel: sel, prob: p, res: res, parent: from}, nil
}

// linkSlope is link l's slope as the network solver floors it.
func linkSlope(sol *network.Solution, l int) float64 {
	var smax float64
	for _, v := range sol.Slope {
		smax = max(smax, v)
	}
	floor := 1e-12 * smax
	if !(floor > 0) {
		floor = 1
	}
	return max(sol.Slope[l], floor)
}

// solveReduced brings state sn of a reduced refit to multipliers pp: the
// link's new flow balances its drop against the linear rest of the network.
func (p *problem) solveReduced(sn *stateNet, pp plant.Params) error {
	th := sn.th
	q, pr := th.q0, th.p0
	if th.l >= 0 {
		elems := p.m.ElementsIn(th.br, pp, sn.st)
		drop := func(q float64) (dp, slope float64) {
			for _, e := range elems {
				d, s := e.Drop(q, p.m.Fluid)
				dp += d
				slope += s
			}
			return dp, slope
		}
		q0 := th.q0[th.l]
		// F(δ) = h(q0+δ) - dp0 + Zδ rises with δ: Newton's method kept
		// inside a bracket that doubles outwards until it holds the root.
		f := func(d float64) (float64, float64) {
			h, s := drop(q0 + d)
			return h - th.dp0 + th.z*d, s + th.z
		}
		delta, slope, err := rootReduced(f, math.Max(math.Abs(q0), 1e-9))
		if err != nil {
			return fmt.Errorf("state %q: branch %q: %w: %w", sn.st.Label, p.m.Branches[th.br].ID, err, lsq.ErrDomain)
		}
		th.slope = slope
		q = make([]float64, len(th.q0))
		for j, v := range th.q0 {
			q[j] = v + delta*th.rq[j]
		}
		pr = make([]float64, len(th.p0))
		for j, v := range th.p0 {
			pr[j] = v + delta*th.rp[j]
		}
	}
	sn.sol = &network.Solution{Flow: q, Pressure: pr}
	sn.params = pp
	return nil
}

// rootReduced finds the root of the increasing f, whose derivative it
// returns beside its value, starting from 0 with the scale s of the root.
// It returns the root and the derivative there.
func rootReduced(f func(float64) (float64, float64), s float64) (float64, float64, error) {
	f0, d0 := f(0)
	if f0 == 0 {
		return 0, d0, nil
	}
	if !finite(f0) {
		return 0, 0, fmt.Errorf("drop not finite")
	}
	// Bracket [a, b] with f(a) < 0 < f(b).
	a, b := 0.0, 0.0
	step := s
	if f0 < 0 {
		for k := 0; ; k++ {
			b = step
			fb, _ := f(b)
			if fb > 0 {
				break
			}
			if !finite(fb) || k > 60 {
				return 0, 0, fmt.Errorf("no flow balances the branch")
			}
			a, step = b, 2*step
		}
	} else {
		for k := 0; ; k++ {
			a = -step
			fa, _ := f(a)
			if fa < 0 {
				break
			}
			if !finite(fa) || k > 60 {
				return 0, 0, fmt.Errorf("no flow balances the branch")
			}
			b, step = a, 2*step
		}
	}
	x := 0.0
	if x <= a || x >= b {
		x = (a + b) / 2
	}
	for range 200 {
		fx, dx := f(x)
		if fx == 0 {
			return x, dx, nil
		}
		if fx < 0 {
			a = x
		} else {
			b = x
		}
		next := x - fx/dx
		if !(dx > 0) || next <= a || next >= b {
			next = (a + b) / 2
		}
		if math.Abs(next-x) <= 1e-15*max(math.Abs(x), s) || b-a <= 1e-15*max(math.Abs(x), s) {
			_, dn := f(next)
			return next, dn, nil
		}
		x = next
	}
	return 0, 0, fmt.Errorf("branch flow did not converge")
}

// jacobianReduced fills the rows of state sn's observations in a reduced
// refit: each parameter moves the link's flow by -(∂drop/∂x)/(slope + Z),
// and every observation follows through the ratios rq and rp.
func (p *problem) jacobianReduced(sn *stateNet, jac *mat.Dense) {
	th := sn.th
	for j := range p.params {
		var dd float64 // d(link flow)/dx_j
		if th.l >= 0 {
			var c float64
			for _, t := range sn.dh[j] {
				if t.i == th.l {
					c += t.c
				}
			}
			dd = -c / (th.slope + th.z)
		}
		for k, oi := range sn.obs {
			var v float64
			if dd != 0 {
				ln := &sn.lin[k]
				for _, t := range ln.q {
					v += t.c * th.rq[t.i]
				}
				for _, t := range ln.p {
					v += t.c * th.rp[t.i]
				}
				v *= dd
			}
			jac.Set(oi, j, v/p.obs[oi].sigma)
		}
	}
	p.jacobianDirect(sn, jac)
}
