package network

import (
	"context"
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Defaults used when Options or one of its fields is zero.
const (
	// DefaultTol is the relative tolerance of convergence: the largest
	// continuity imbalance at a node must not exceed Tol times the largest
	// link flow, and the largest energy error of a link (its elements' drop
	// minus the pressure difference across it) Tol times the largest link
	// drop.
	DefaultTol = 1e-10
	// DefaultMaxIter is the number of Newton iterations allowed.
	DefaultMaxIter = 100
)

// Constants of the Newton iteration.
const (
	// slopeFloorRel: a link slope below this fraction of the geometric mean
	// of the positive link slopes is raised to it, so the diagonal D stays
	// invertible at zero flow through square-law elements, nearly closed
	// valves and pumps near shut-off. It only changes the step direction,
	// never the residuals that decide convergence.
	slopeFloorRel = 1e-8
	// probeFlow [m3/s] (3.6 m3/h, a typical hydronic branch) is where each
	// link is probed once on a cold start to estimate its resistance.
	probeFlow = 1e-3
	// defaultDrive [Pa] is the characteristic differential assumed on a
	// cold start when neither fixed pressures nor pumps drive the flow (an
	// open network fed only by demands): 10 kPa, common practice for a
	// hydronic branch, no source; it only shapes the first step.
	defaultDrive = 1e4
	// maxBacktrack bounds the step halvings of one line search.
	maxBacktrack = 40
	// armijo is the sufficient-decrease fraction of the line search.
	armijo = 1e-4
)

// Options tunes Solve. A nil *Options or a zero field means the default.
type Options struct {
	Tol     float64   // relative tolerance, default DefaultTol
	MaxIter int       // Newton iterations, default DefaultMaxIter
	Initial []float64 // warm-start link flows [m3/s], e.g. a previous Solution.Flow; nil starts cold
}

// Solution is the converged state of a network.
type Solution struct {
	Flow     []float64 // per link, m3/s, positive from -> to
	Pressure []float64 // per node, Pa
	Drop     []float64 // per link, Pa: sum of the elements' drops at Flow
	Slope    []float64 // per link, Pa s/m3: d(Drop)/d(Flow)

	Iterations     int     // Newton steps taken
	MaxImbalance   float64 // largest continuity error at a node, m3/s
	MaxEnergyError float64 // largest |Drop - (p_from - p_to)| over links, Pa

	pl   *plan
	d    []float64         // the (floored) slopes of the factorised matrix
	chol *mat.BandCholesky // factor of A21 D^-1 A12 at the solution
}

// ConvergenceError reports a Solve that stopped before meeting its
// tolerance. It wraps ErrNoConvergence.
type ConvergenceError struct {
	Iterations     int
	WorstLink      string  // link with the largest energy error
	WorstNode      string  // node with the largest continuity imbalance ("" if none)
	Residual       float64 // largest residual relative to its tolerance scale (1 = on the tolerance)
	MaxEnergyError float64 // Pa
	MaxImbalance   float64 // m3/s
	Cause          error   // non-nil when the iteration was stopped (context), not exhausted
}

func (e *ConvergenceError) Error() string {
	s := fmt.Sprintf("no convergence after %d iterations: worst link %q (energy error %.3g Pa)", e.Iterations, e.WorstLink, e.MaxEnergyError)
	if e.WorstNode != "" {
		s += fmt.Sprintf(", worst node %q (imbalance %.3g m3/s)", e.WorstNode, e.MaxImbalance)
	}
	s += fmt.Sprintf(", relative residual %.3g", e.Residual)
	if e.Cause != nil {
		s += ": " + e.Cause.Error()
	}
	return s
}

// Unwrap returns ErrNoConvergence and, when the iteration was interrupted,
// the context's error.
func (e *ConvergenceError) Unwrap() []error {
	if e.Cause != nil {
		return []error{ErrNoConvergence, e.Cause}
	}
	return []error{ErrNoConvergence}
}

// state is one iterate with its residuals.
type state struct {
	q, p   []float64 // link flows, node pressures
	h, s   []float64 // link drops and slopes at q
	e      []float64 // energy residual per link: h - (p_from - p_to)
	c      []float64 // continuity residual per band position: inflow - outflow - demand
	maxE   float64
	maxC   float64
	worstL int
	worstN int // band position, -1 if none
	scaleE float64
	scaleQ float64
	floorE float64 // pressure round-off allowance, Pa
}

func newState(nl, nn, nf int) *state {
	return &state{
		q: make([]float64, nl), p: make([]float64, nn),
		h: make([]float64, nl), s: make([]float64, nl),
		e: make([]float64, nl), c: make([]float64, nf),
	}
}

// Solve finds the link flows and node pressures of the network by the global
// gradient algorithm of E. Todini & S. Pilati ("A gradient algorithm for the
// analysis of pipe networks", in Coulbeck & Orr (eds.), Computer Applications
// in Water Supply, vol. 1, 1988): Newton's method on the energy equation of
// every link and the continuity equation of every free node,
//
//	[ D    A12 ] [dq]     [ E ]      E = h(q) + A12 p + A10 p0
//	[ A21   0  ] [dp] = - [ C ],     C = A21 q - demand,
//
// with D = diag(link slopes) and A12 the link-node incidence of the free
// nodes (+1 at a link's to node, -1 at its from node; A21 = A12ᵀ). Eliminating
// dq leaves S dp = C - A21 D^-1 E with S = A21 D^-1 A12 symmetric positive
// definite; S is factorised by a banded Cholesky after reverse Cuthill-McKee
// reordering, then dq = -D^-1 (E + A12 dp). Steps are damped by backtracking
// on the weighted residual norm. The iteration stops when the largest
// continuity imbalance and energy error are within the relative tolerance;
// otherwise it returns a *ConvergenceError. ctx is checked between
// iterations.
func (n *Network) Solve(ctx context.Context, opt *Options) (*Solution, error) {
	pl, err := n.prepare()
	if err != nil {
		return nil, err
	}
	tol, maxIter := DefaultTol, DefaultMaxIter
	var initial []float64
	if opt != nil {
		if opt.Tol < 0 || math.IsNaN(opt.Tol) {
			return nil, fmt.Errorf("tolerance %g must be positive: %w", opt.Tol, ErrInput)
		}
		if opt.Tol > 0 {
			tol = opt.Tol
		}
		if opt.MaxIter < 0 {
			return nil, fmt.Errorf("max iterations %d must be positive: %w", opt.MaxIter, ErrInput)
		}
		if opt.MaxIter > 0 {
			maxIter = opt.MaxIter
		}
		if opt.Initial != nil {
			if len(opt.Initial) != len(n.links) {
				return nil, fmt.Errorf("initial flows: %d values for %d links: %w", len(opt.Initial), len(n.links), ErrInput)
			}
			for i, v := range opt.Initial {
				if !finite(v) {
					return nil, fmt.Errorf("initial flow of link %q is %g: %w", n.links[i].id, v, ErrElement)
				}
			}
			initial = opt.Initial
		}
	}

	nl, nn, nf := len(n.links), len(n.nodeID), pl.nFree
	cur, trial := newState(nl, nn, nf), newState(nl, nn, nf)
	// Free pressures start at the mean fixed pressure; with a full Newton
	// step the new pressures do not depend on the old ones.
	var pmean float64
	var nfix int
	for i := range nn {
		if n.fixed[i] {
			pmean += n.pfix[i]
			nfix++
		}
	}
	pmean /= float64(nfix)
	for i := range nn {
		cur.p[i] = pmean
		if n.fixed[i] {
			cur.p[i] = n.pfix[i]
		}
	}
	copy(trial.p, cur.p)
	if initial != nil {
		copy(cur.q, initial)
	}
	if err := n.evaluate(pl, cur); err != nil {
		return nil, err
	}
	var char []float64
	if initial == nil {
		if char, err = n.characteristicSlopes(cur); err != nil {
			return nil, err
		}
	}

	d := make([]float64, nl)
	invD := make([]float64, nl)
	dp := make([]float64, nf)
	dq := make([]float64, nl)
	wc := make([]float64, nf) // continuity weights 1/S_jj: turn m3/s into Pa
	var band []float64
	var sym *mat.SymBandDense
	var chol *mat.BandCholesky
	if nf > 0 {
		band = make([]float64, nf*(pl.k+1))
		sym = mat.NewSymBandDense(nf, pl.k, band)
		chol = &mat.BandCholesky{}
	}
	rhsVec := mat.NewVecDense(max(nf, 1), nil)
	dpVec := mat.NewVecDense(max(nf, 1), nil)

	for iter := 0; ; iter++ {
		// Newton matrix at the current iterate.
		floor := slopeFloor(cur.s)
		for i := range d {
			di := max(cur.s[i], floor)
			if iter == 0 && char != nil {
				di = max(di, char[i])
			}
			d[i] = di
			invD[i] = 1 / di
		}
		if nf > 0 {
			clear(band)
			w := pl.k + 1
			for i := range nl {
				a, b := pl.pa[i], pl.pb[i]
				g := invD[i]
				if a >= 0 {
					band[a*w] += g
				}
				if b >= 0 {
					band[b*w] += g
				}
				if a >= 0 && b >= 0 {
					lo, hi := min(a, b), max(a, b)
					band[lo*w+hi-lo] -= g
				}
			}
			for j := range nf {
				wc[j] = 1 / band[j*w]
			}
			if !chol.Factorize(sym) {
				return nil, fmt.Errorf("node matrix not positive definite at iteration %d: %w", iter, ErrNoConvergence)
			}
		}
		if converged(cur, tol) {
			return n.solution(pl, cur, d, chol, iter), nil
		}
		if iter >= maxIter {
			return nil, n.convergenceError(pl, cur, iter, nil)
		}
		if err := ctx.Err(); err != nil {
			return nil, n.convergenceError(pl, cur, iter, err)
		}

		// Newton step: S dp = C - A21 D^-1 E, dq = -D^-1 (E + A12 dp).
		if nf > 0 {
			r := rhsVec.RawVector().Data
			copy(r, cur.c)
			for i := range nl {
				t := cur.e[i] * invD[i]
				if a := pl.pa[i]; a >= 0 {
					r[a] += t
				}
				if b := pl.pb[i]; b >= 0 {
					r[b] -= t
				}
			}
			if err := solveBand(chol, dpVec, rhsVec); err != nil {
				return nil, err
			}
			copy(dp, dpVec.RawVector().Data[:nf])
		}
		for i := range nl {
			var adp float64
			if b := pl.pb[i]; b >= 0 {
				adp += dp[b]
			}
			if a := pl.pa[i]; a >= 0 {
				adp -= dp[a]
			}
			dq[i] = -(cur.e[i] + adp) * invD[i]
		}

		// Backtracking on f = |E|² + |C/S_jj|², the residual norm with
		// continuity expressed in Pa.
		f0 := merit(cur, wc)
		alpha := 1.0
		for bt := 0; ; bt++ {
			for i := range nl {
				trial.q[i] = cur.q[i] + alpha*dq[i]
			}
			for node, pos := range pl.pos {
				if pos >= 0 {
					trial.p[node] = cur.p[node] + alpha*dp[pos]
				}
			}
			if err := n.evaluate(pl, trial); err != nil {
				return nil, err
			}
			ft := merit(trial, wc)
			if ft <= (1-armijo*alpha)*f0 || bt == maxBacktrack {
				break
			}
			// Minimiser of the quadratic through f(0), f'(0) = -2 f(0)
			// (exact for a Newton direction) and f(alpha), kept within
			// [0.1, 0.5] alpha.
			next := alpha * alpha * f0 / (ft - f0 + 2*alpha*f0)
			if !(next >= 0.1*alpha) {
				next = 0.1 * alpha
			}
			alpha = min(next, 0.5*alpha)
		}
		cur, trial = trial, cur
	}
}

// solveBand solves with the factor, accepting gonum's ill-conditioning
// warning: the residual test, not the condition estimate, decides
// convergence.
func solveBand(chol *mat.BandCholesky, dst, b *mat.VecDense) error {
	err := chol.SolveVecTo(dst, b)
	var cond mat.Condition
	if err != nil && !errors.As(err, &cond) {
		return err
	}
	return nil
}

// evaluate fills the drops, slopes and residuals of st at its q and p.
func (n *Network) evaluate(pl *plan, st *state) error {
	fl := n.Fluid
	for i := range n.links {
		l := &n.links[i]
		var dp, sl float64
		for _, e := range l.elems {
			a, b := e.Drop(st.q[i], fl)
			dp += a
			sl += b
		}
		if !finite(dp) || !finite(sl) {
			return fmt.Errorf("link %q at flow %g m3/s: drop %g Pa, slope %g: %w", l.id, st.q[i], dp, sl, ErrElement)
		}
		st.h[i], st.s[i] = dp, sl
	}
	n.residuals(pl, st)
	return nil
}

// residuals fills e and c and their norms from q, p and h.
func (n *Network) residuals(pl *plan, st *state) {
	for node, pos := range pl.pos {
		if pos >= 0 {
			st.c[pos] = -n.demand[node]
		}
	}
	st.maxE, st.scaleE, st.scaleQ = 0, 0, 0
	st.worstL, st.worstN = 0, -1
	var pmax float64
	for _, p := range st.p {
		pmax = max(pmax, math.Abs(p))
	}
	for i := range n.links {
		l := &n.links[i]
		q := st.q[i]
		e := st.h[i] - st.p[l.from] + st.p[l.to]
		st.e[i] = e
		if ae := math.Abs(e); ae > st.maxE {
			st.maxE, st.worstL = ae, i
		}
		st.scaleE = max(st.scaleE, math.Abs(st.h[i]))
		st.scaleQ = max(st.scaleQ, math.Abs(q))
		if a := pl.pa[i]; a >= 0 {
			st.c[a] -= q
		}
		if b := pl.pb[i]; b >= 0 {
			st.c[b] += q
		}
	}
	st.maxC = 0
	for j, c := range st.c {
		if ac := math.Abs(c); ac > st.maxC {
			st.maxC, st.worstN = ac, j
		}
	}
	for _, q := range n.demand {
		st.scaleQ = max(st.scaleQ, math.Abs(q))
	}
	// A pressure difference cannot be resolved better than a few ulp of
	// the absolute pressures.
	st.floorE = 8 * pmax * 0x1p-52
}

func converged(st *state, tol float64) bool {
	return st.maxE <= tol*st.scaleE+st.floorE && st.maxC <= tol*st.scaleQ
}

func merit(st *state, wc []float64) float64 {
	var f float64
	for _, e := range st.e {
		f += e * e
	}
	for j, c := range st.c {
		x := c * wc[j]
		f += x * x
	}
	return f
}

// slopeFloor returns slopeFloorRel times the geometric mean of the positive
// slopes, the mean taken over binary exponents to stay cheap and immune to
// the huge slopes of closed valves.
func slopeFloor(s []float64) float64 {
	var sum, cnt int
	for _, v := range s {
		if v > 0 {
			_, e := math.Frexp(v)
			sum += e
			cnt++
		}
	}
	if cnt == 0 {
		return 1
	}
	return slopeFloorRel * math.Ldexp(1, sum/cnt)
}

// characteristicSlopes estimates, for a cold start at zero flow, the secant
// slope of each link at a characteristic differential so the first step has
// the right order of magnitude even where the slope at zero flow vanishes:
// each link is probed once at probeFlow, taken as square-law from there
// (r = Δh/q²), and given the slope sqrt(P r) it would have at the
// differential P of the fixed pressures or pumps. st holds the drops at zero
// flow.
func (n *Network) characteristicSlopes(st *state) ([]float64, error) {
	var drive float64
	pmin, pmax := math.Inf(1), math.Inf(-1)
	for i := range n.nodeID {
		if n.fixed[i] {
			pmin, pmax = min(pmin, n.pfix[i]), max(pmax, n.pfix[i])
		}
	}
	drive = pmax - pmin
	for _, h := range st.h {
		drive = max(drive, -h, h) // pump gains at shut-off, any offset
	}
	if drive == 0 {
		for _, q := range n.demand {
			if q != 0 {
				drive = defaultDrive
				break
			}
		}
	}
	if drive == 0 {
		return nil, nil // nothing drives a flow: zero flow is the answer
	}
	char := make([]float64, len(n.links))
	for i := range n.links {
		var hp float64
		for _, e := range n.links[i].elems {
			a, _ := e.Drop(probeFlow, n.Fluid)
			hp += a
		}
		if !finite(hp) {
			return nil, fmt.Errorf("link %q at flow %g m3/s: drop %g Pa: %w", n.links[i].id, probeFlow, hp, ErrElement)
		}
		if r := (hp - st.h[i]) / (probeFlow * probeFlow); r > 0 {
			char[i] = math.Sqrt(drive * r)
		}
	}
	return char, nil
}

func (n *Network) convergenceError(pl *plan, st *state, iter int, cause error) error {
	ce := &ConvergenceError{
		Iterations:     iter,
		MaxEnergyError: st.maxE,
		MaxImbalance:   st.maxC,
		Cause:          cause,
	}
	if len(n.links) > 0 {
		ce.WorstLink = n.links[st.worstL].id
	}
	if st.worstN >= 0 && st.maxC > 0 {
		for node, pos := range pl.pos {
			if pos == st.worstN {
				ce.WorstNode = n.nodeID[node]
				break
			}
		}
	}
	ce.Residual = relative(st.maxE, st.scaleE+st.floorE)
	if st.maxC > 0 {
		ce.Residual = max(ce.Residual, relative(st.maxC, st.scaleQ))
	}
	return ce
}

func relative(x, scale float64) float64 {
	if scale == 0 {
		if x == 0 {
			return 0
		}
		return math.Inf(1)
	}
	return x / scale
}

func (n *Network) solution(pl *plan, st *state, d []float64, chol *mat.BandCholesky, iter int) *Solution {
	sol := &Solution{
		Flow:           append([]float64(nil), st.q...),
		Pressure:       append([]float64(nil), st.p...),
		Drop:           append([]float64(nil), st.h...),
		Slope:          append([]float64(nil), st.s...),
		Iterations:     iter,
		MaxImbalance:   st.maxC,
		MaxEnergyError: st.maxE,
		pl:             pl,
		d:              append([]float64(nil), d...),
		chol:           chol,
	}
	return sol
}
