package network

import (
	"context"
	"fmt"
	"math"
	"slices"

	"flowset/internal/parallel"
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
	// slopeFloorRel: a link slope below this fraction of the largest link
	// slope is raised to it, so the diagonal D stays invertible at zero flow
	// through square-law elements, nearly closed valves and pumps near
	// shut-off, and the conductances 1/D in the node matrix span at most 12
	// decades (beyond that round-off in the band Cholesky can exceed the
	// smallest pivots). Real hydronic slopes, from a main at full flow to a
	// shut valve's seat leakage, span about 10 decades. The floor only
	// changes the step direction, never the residuals that decide
	// convergence.
	slopeFloorRel = 1e-12
	// floorRetries: if round-off still makes the node matrix indefinite,
	// the floor is raised a thousandfold and the factorisation retried this
	// many times.
	floorRetries = 3
	// probeFlow [m3/s] (3.6 m3/h, a typical hydronic branch) is where each
	// link's first secant is taken on a cold start.
	probeFlow = 1e-3
	// maxLinear bounds the linear-theory solves of a cold start; they stop
	// earlier once every flow above linearSettle of the largest (but for
	// linearStragglers of them) changes by less than the factor
	// linearRatio. Newton's step control counts flows
	// below trustFloor of the largest as that floor, so smaller ones need
	// not settle first (on long ladders the far branches' flows otherwise
	// kept the linear solves going for several rounds at 1e-8 of the
	// largest flow).
	maxLinear    = 10
	linearSettle = trustFloor
	linearRatio  = 1.5
	// linearStragglers is the fraction of the flows that may still be
	// unsettled when the linear solves stop (none below 100 links): on long
	// ladders a few far-end header segments settle a solve or two after
	// the rest, and Newton's step control copes with them.
	linearStragglers = 0.01
	// fullStep is the largest relative flow change of a step taken without
	// line search; flows below trustFloor of the largest count as that.
	fullStep   = 0.5
	trustFloor = 1e-6
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
	// Workers is the number of goroutines that evaluate the elements'
	// drops of a network of more than evalChunk links, each a share of the
	// links (the same solution to the bit on any number; elements' Drop
	// methods are pure functions of the flow and fluid); 0 or nil options:
	// runtime.GOMAXPROCS(0). A caller that already runs solves side by side
	// on every core may pass 1 to keep to one goroutine per core.
	Workers int
}

// Solution is the converged state of a network.
type Solution struct {
	Flow     []float64 // per link, m3/s, positive from -> to
	Pressure []float64 // per node, Pa
	Drop     []float64 // per link, Pa: sum of the elements' drops at Flow
	Slope    []float64 // per link, Pa s/m3: d(Drop)/d(Flow)

	Iterations     int     // linear solves: cold-start linear-theory steps, then Newton steps
	MaxImbalance   float64 // largest continuity error at a node, m3/s
	MaxEnergyError float64 // largest |Drop - (p_from - p_to)| over links, Pa

	pl   *plan
	d    []float64 // the (floored) slopes of the factorised matrix
	chol factorer  // factor of A21 D^-1 A12 at the solution
}

// ConvergenceError reports a Solve that stopped before meeting its
// tolerance. It wraps ErrNoConvergence.
type ConvergenceError struct {
	Iterations     int
	WorstLink      string  // link with the largest energy error
	WorstNode      string  // node with the largest continuity imbalance ("" if none)
	Residual       float64 // largest residual relative to its scale (largest drop or flow), to compare with Tol
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
// reordering, then dq = -D^-1 (E + A12 dp). Slopes are floored (see
// slopeFloorRel) so D is invertible at zero flow. A cold start (no
// Options.Initial) first runs a few linear-theory solves to get flows of the
// right order everywhere (see linearTheory). A Newton step that changes no
// flow by more than half is taken whole; a larger one is damped by
// backtracking on the residual norm. The iteration stops when the largest
// continuity imbalance and energy error are within the relative tolerance;
// otherwise it returns a *ConvergenceError. ctx is checked between
// iterations.
//
// Square-law links whose answer is near zero flow (branches starved by an
// undersized header) converge only linearly, their flow halving at each
// step, so such networks take more iterations.
func (n *Network) Solve(ctx context.Context, opt *Options) (*Solution, error) {
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("solve: %w", err)
	}
	pl, err := n.prepare()
	if err != nil {
		return nil, err
	}
	tol, maxIter := DefaultTol, DefaultMaxIter
	var initial []float64
	workers := 0
	if opt != nil {
		workers = opt.Workers
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

	nn := len(n.nodeID)
	ws := n.takeWorkspace(pl)
	defer n.putWorkspace(ws)
	ws.workers = parallel.Workers(workers)
	cur, trial, sy := ws.cur, ws.trial, ws.sy
	// Demands by band position, and their scale, for the residuals.
	ws.dmax = 0
	for node, d := range n.demand {
		if pos := pl.pos[node]; pos >= 0 {
			ws.demand[pos] = d
		}
		ws.dmax = max(ws.dmax, math.Abs(d))
	}
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
	} else {
		clear(cur.q)
	}
	if err := n.evaluate(ws, cur); err != nil {
		return nil, err
	}
	iter := 0
	if initial == nil {
		if cur, trial, iter, err = n.linearTheory(ctx, ws, cur, trial, min(maxLinear, maxIter)); err != nil {
			return nil, err
		}
	}
	nl := len(n.links)

	for ; ; iter++ {
		// Newton matrix at the current iterate.
		if err := sy.factor(cur.s); err != nil {
			return nil, err
		}
		if converged(cur, tol) {
			return n.solution(ws, cur, iter), nil
		}
		if iter >= maxIter {
			return nil, n.convergenceError(pl, cur, iter, nil)
		}
		if err := ctx.Err(); err != nil {
			return nil, n.convergenceError(pl, cur, iter, err)
		}
		sy.step(cur.e, cur.c)

		// A step that changes no flow by more than fullStep of itself is
		// taken whole: Newton's method is then in its region of quadratic
		// convergence, where a residual norm can rise on the way (a flow
		// error without energy error shows up only after the step). A
		// larger step backtracks on f = |E|² + |C/S_jj|², the residual
		// norm with continuity expressed in Pa.
		trust := true
		qtiny := trustFloor * cur.scaleQ
		for i, v := range sy.dq {
			if math.Abs(v) > fullStep*(math.Abs(cur.q[i])+qtiny) {
				trust = false
				break
			}
		}
		var f0 float64
		if !trust {
			f0 = merit(cur, sy.wc)
		}
		alpha := 1.0
		for bt := 0; ; bt++ {
			for i := range nl {
				trial.q[i] = cur.q[i] + alpha*sy.dq[i]
			}
			for node, pos := range pl.pos {
				if pos >= 0 {
					trial.p[node] = cur.p[node] + alpha*sy.dp[pos]
				}
			}
			if err := n.evaluate(ws, trial); err != nil {
				return nil, err
			}
			if trust {
				break
			}
			ft := merit(trial, sy.wc)
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

// linearTheory brings a cold start (zero flow, held in cur) to flows of the
// right order everywhere before Newton's method, which from far too small
// flows overshoots and crawls under its line search. Each link's drop is
// replaced by its secant from zero flow, h(q) ≈ h(0) + D q; the linear
// network is solved, the secants are taken at the new flows and the flows
// averaged with the previous ones, in the manner of the linear theory method
// of D. J. Wood & C. O. A. Charles ("Hydraulic network analysis using linear
// theory", J. Hydraul. Div. ASCE 98(HY7), 1972, 1157-1170). The average is
// geometric (per link, where the signs agree): a square-law link whose
// secant solve answers q' = Q²/q from q then lands on Q exactly. The first
// secants are taken at probeFlow. At most maxSolves solves are made. It
// returns the state at the averaged
// flows, the spare state and the number of linear solves.
func (n *Network) linearTheory(ctx context.Context, ws *workspace, cur, trial *state, maxSolves int) (_, _ *state, solves int, err error) {
	pl, sy := ws.pl, ws.sy
	nl := len(n.links)
	h0, e0, c0, p0 := ws.h0, ws.e0, ws.c0, ws.p0
	copy(h0, cur.h)
	copy(e0, cur.e)
	copy(c0, cur.c)
	copy(p0, cur.p)
	sec := ws.sec // secant slopes from zero flow
	for i := range n.links {
		var hp float64
		for _, e := range n.links[i].elems {
			a, _ := e.Drop(probeFlow, n.Fluid)
			hp += a
		}
		if !finite(hp) {
			return nil, nil, 0, fmt.Errorf("link %q at flow %g m3/s: drop %g Pa: %w", n.links[i].id, probeFlow, hp, ErrElement)
		}
		sec[i] = (hp - h0[i]) / probeFlow
	}
	var prev []float64 // the previous solve's flows, nil before the second
	for range maxSolves {
		if err := ctx.Err(); err != nil {
			return nil, nil, 0, n.convergenceError(pl, cur, solves, err)
		}
		if err := sy.factor(sec); err != nil {
			return nil, nil, 0, err
		}
		sy.step(e0, c0)
		solves++
		// From zero flow the linear solution is dq itself.
		unsettled := 0
		var qmax float64
		for _, v := range sy.dq {
			qmax = max(qmax, math.Abs(v))
		}
		if qmax == 0 {
			return cur, trial, solves, nil // nothing drives a flow
		}
		for i := range nl {
			q := sy.dq[i]
			if prev != nil && q*prev[i] > 0 {
				if math.Abs(q) > linearSettle*qmax {
					if r := q / prev[i]; r > linearRatio || r < 1/linearRatio {
						unsettled++
					}
				}
				q = math.Copysign(math.Sqrt(q*prev[i]), q)
			} else if prev != nil && math.Abs(q) > linearSettle*qmax {
				unsettled++
			}
			trial.q[i] = q
		}
		done := prev != nil && unsettled <= int(linearStragglers*float64(nl))
		for node, pos := range pl.pos {
			if pos >= 0 {
				trial.p[node] = p0[node] + sy.dp[pos]
			}
		}
		if err := n.evaluate(ws, trial); err != nil {
			return nil, nil, 0, err
		}
		cur, trial = trial, cur
		if done {
			break
		}
		prev = ws.prev
		copy(prev, cur.q)
		for i, q := range cur.q {
			if q != 0 {
				if v := (cur.h[i] - h0[i]) / q; v > 0 {
					sec[i] = v
				}
			}
		}
	}
	return cur, trial, solves, nil
}

// system holds the linearised equations of one step: the diagonal D (set
// by the caller), the factor of S = A21 D^-1 A12 and the step.
type system struct {
	pl     *plan
	d      []float64 // floored link slopes
	invD   []float64
	dq, dp []float64 // step per link and per band position
	wc     []float64 // continuity weights 1/S_jj: turn m3/s into Pa
	band   []float64 // S, factorised in place; handed to the Solution
	rdiag  []float64 // reciprocals of the factor's diagonal; handed to the Solution
	chol   factorer
}

func newSystem(pl *plan, nl int) *system {
	return &system{
		pl: pl, d: make([]float64, nl), invD: make([]float64, nl), dq: make([]float64, nl),
		dp: make([]float64, pl.nFree), wc: make([]float64, pl.nFree),
	}
}

// factor sets D to the slopes, floored (see slopeFloorRel), assembles S
// and factorises it.
func (sy *system) factor(slopes []float64) error {
	pl := sy.pl
	var smax float64
	for _, v := range slopes {
		if v > smax {
			smax = v
		}
	}
	floor := slopeFloorRel * smax
	if !(floor > 0) {
		floor = 1 // all slopes zero: any positive D gives the same step direction
	}
	dd, invD := sy.d[:len(slopes)], sy.invD[:len(slopes)]
	for attempt := 0; ; attempt++ {
		for i, v := range slopes {
			d := v
			if !(d >= floor) {
				d = floor
			}
			dd[i], invD[i] = d, 1/d
		}
		if pl.nFree == 0 {
			return nil
		}
		if pl.sp != nil {
			if sy.factorSparse() {
				return nil
			}
			if attempt == floorRetries {
				return fmt.Errorf("node matrix not positive definite (link slopes %g to %g Pa s/m3): %w", floor, smax, ErrNoConvergence)
			}
			floor *= 1e3
			continue
		}
		if sy.band == nil {
			sy.band = make([]float64, pl.nFree*(pl.k+1))
			sy.rdiag = make([]float64, pl.nFree)
		}
		band := sy.band
		clear(band)
		w := pl.k + 1
		pa, pb := pl.pa[:len(invD)], pl.pb[:len(invD)]
		for i, g := range invD {
			a, b := pa[i], pb[i]
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
		wc := sy.wc
		for j := range wc {
			wc[j] = 1 / band[j*w]
		}
		var ok bool
		if sy.chol, ok = factorBand(pl.nFree, pl.k, band, sy.rdiag); ok {
			return nil
		}
		if attempt == floorRetries {
			return fmt.Errorf("node matrix not positive definite (link slopes %g to %g Pa s/m3): %w", floor, smax, ErrNoConvergence)
		}
		floor *= 1e3
	}
}

// factorSparse assembles S = A21 D^-1 A12 on the sparse plan's structure
// (diagonal first in sy.band, then the entries below it) and factorises it;
// false when S is not positive definite.
func (sy *system) factorSparse() bool {
	pl := sy.pl
	sp := pl.sp
	if sy.band == nil {
		sy.band = make([]float64, pl.nFree+len(sp.row))
		sy.rdiag = make([]float64, pl.nFree)
	}
	clear(sy.band)
	diag, val := sy.band[:pl.nFree], sy.band[pl.nFree:]
	pa, pb := pl.pa[:len(sy.invD)], pl.pb[:len(sy.invD)]
	for i, g := range sy.invD {
		a, b := pa[i], pb[i]
		if a >= 0 {
			diag[a] += g
		}
		if b >= 0 {
			diag[b] += g
		}
		if e := sp.entry[i]; e >= 0 {
			val[e] -= g
		}
	}
	for j := range sy.wc {
		sy.wc[j] = 1 / diag[j]
	}
	var ok bool
	sy.chol, ok = factorSparse(sp, diag, val, sy.rdiag)
	return ok
}

// step solves S dp = C - A21 D^-1 E, dq = -D^-1 (E + A12 dp) for the
// energy residuals e (per link) and continuity residuals c (per position).
func (sy *system) step(e, c []float64) {
	pl := sy.pl
	invD, pa, pb, dq, dp := sy.invD[:len(e)], pl.pa[:len(e)], pl.pb[:len(e)], sy.dq[:len(e)], sy.dp
	if pl.nFree > 0 {
		r := dp
		copy(r, c)
		for i, ei := range e {
			t := ei * invD[i]
			if a := pa[i]; a >= 0 {
				r[a] += t
			}
			if b := pb[i]; b >= 0 {
				r[b] -= t
			}
		}
		sy.chol.solve(r)
	}
	for i, ei := range e {
		var adp float64
		if b := pb[i]; b >= 0 {
			adp += dp[b]
		}
		if a := pa[i]; a >= 0 {
			adp -= dp[a]
		}
		dq[i] = -(ei + adp) * invD[i]
	}
}

// evalChunk is the number of links per task when evaluate splits the
// links over goroutines: a link's elements cost 0.1-1 µs, so a task is
// worth far more than handing it over.
const evalChunk = 2048

// evaluate fills the drops, slopes and residuals of st at its q and p. On a
// network of more than evalChunk links the drops are worked out on up to
// ws.workers goroutines, each link's by the same operations; a non-finite
// drop is reported for the first such link, as on one.
func (n *Network) evaluate(ws *workspace, st *state) error {
	q := st.q[:len(n.links)]
	tasks := (len(q) + evalChunk - 1) / evalChunk
	if ws.workers <= 1 || tasks <= 1 {
		if bad := n.drops(st, 0, len(q)); bad >= 0 {
			return n.dropErr(st, bad)
		}
		residuals(ws, st)
		return nil
	}
	if len(ws.bad) != tasks {
		ws.bad = make([]int, tasks)
	}
	parallel.For(ws.workers, tasks, func(_, k int) {
		ws.bad[k] = n.drops(st, k*evalChunk, min((k+1)*evalChunk, len(q)))
	})
	for _, bad := range ws.bad {
		if bad >= 0 {
			return n.dropErr(st, bad)
		}
	}
	residuals(ws, st)
	return nil
}

// drops fills st's drops and slopes of links [lo, hi) at their flows and
// returns the first link whose drop or slope is not finite, or -1.
func (n *Network) drops(st *state, lo, hi int) int {
	fl := n.Fluid
	q, h, s := st.q, st.h, st.s
	for i := lo; i < hi; i++ {
		var dp, sl float64
		for _, e := range n.links[i].elems {
			a, b := e.Drop(q[i], fl)
			dp += a
			sl += b
		}
		if !finite(dp) || !finite(sl) {
			return i
		}
		h[i], s[i] = dp, sl
	}
	return -1
}

// dropErr is the error of link i's non-finite drop or slope at st's flow.
func (n *Network) dropErr(st *state, i int) error {
	var dp, sl float64
	for _, e := range n.links[i].elems {
		a, b := e.Drop(st.q[i], n.Fluid)
		dp += a
		sl += b
	}
	return fmt.Errorf("link %q at flow %g m3/s: drop %g Pa, slope %g: %w", n.links[i].id, st.q[i], dp, sl, ErrElement)
}

// residuals fills e and c and their norms from q, p and h.
func residuals(ws *workspace, st *state) {
	pl := ws.pl
	c := st.c
	for j, d := range ws.demand[:len(c)] {
		c[j] = -d
	}
	// Plain comparisons rather than max, whose NaN and signed-zero rules
	// cost more: evaluate has already refused non-finite drops.
	var pmax float64
	for _, p := range st.p {
		if a := math.Abs(p); a > pmax {
			pmax = a
		}
	}
	q, p := st.q, st.p
	h, e := st.h[:len(q)], st.e[:len(q)]
	from, to, pa, pb := pl.from[:len(q)], pl.to[:len(q)], pl.pa[:len(q)], pl.pb[:len(q)]
	var maxE, scaleE, scaleQ float64
	worstL := 0
	for i, qi := range q {
		ei := h[i] - p[from[i]] + p[to[i]]
		e[i] = ei
		if ae := math.Abs(ei); ae > maxE {
			maxE, worstL = ae, i
		}
		if ah := math.Abs(h[i]); ah > scaleE {
			scaleE = ah
		}
		if aq := math.Abs(qi); aq > scaleQ {
			scaleQ = aq
		}
		if a := pa[i]; a >= 0 {
			c[a] -= qi
		}
		if b := pb[i]; b >= 0 {
			c[b] += qi
		}
	}
	var maxC float64
	worstN := -1
	for j, cj := range c {
		if ac := math.Abs(cj); ac > maxC {
			maxC, worstN = ac, j
		}
	}
	st.maxE, st.worstL, st.maxC, st.worstN = maxE, worstL, maxC, worstN
	st.scaleE, st.scaleQ = scaleE, max(scaleQ, ws.dmax)
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

// solution returns the Solution of the converged state st. It takes the
// factorised band matrix over from the workspace.
func (n *Network) solution(ws *workspace, st *state, iter int) *Solution {
	sy := ws.sy
	sol := &Solution{
		Flow:           slices.Clone(st.q),
		Pressure:       slices.Clone(st.p),
		Drop:           slices.Clone(st.h),
		Slope:          slices.Clone(st.s),
		Iterations:     iter,
		MaxImbalance:   st.maxC,
		MaxEnergyError: st.maxE,
		pl:             ws.pl,
		d:              slices.Clone(sy.d),
		chol:           sy.chol,
	}
	sy.band, sy.rdiag, sy.chol = nil, nil, nil
	return sol
}

// workspace is the scratch memory of Solve for one plan: two states, the
// linear system and the cold start's copies. The Network keeps one between
// solves (about 150 bytes per link), so repeated solves of a large network do
// not allocate and clear it again.
type workspace struct {
	pl                        *plan
	cur, trial                *state
	sy                        *system
	h0, e0, c0, p0, sec, prev []float64
	demand                    []float64 // per band position
	dmax                      float64   // largest |demand| over all nodes
	workers                   int       // goroutines of evaluate (Options.Workers)
	bad                       []int     // evaluate's first bad link per task
}

// takeWorkspace returns the Network's workspace for pl, or a new one.
func (n *Network) takeWorkspace(pl *plan) *workspace {
	n.mu.Lock()
	ws := n.ws
	n.ws = nil
	n.mu.Unlock()
	if ws != nil && ws.pl == pl {
		return ws
	}
	nl, nn, nf := len(pl.pa), len(pl.pos), pl.nFree
	return &workspace{
		pl:  pl,
		cur: newState(nl, nn, nf), trial: newState(nl, nn, nf),
		sy: newSystem(pl, nl),
		h0: make([]float64, nl), e0: make([]float64, nl), c0: make([]float64, nf), p0: make([]float64, nn),
		sec: make([]float64, nl), prev: make([]float64, nl),
		demand: make([]float64, nf),
	}
}

// putWorkspace gives ws back to the Network if its plan is still current.
func (n *Network) putWorkspace(ws *workspace) {
	n.mu.Lock()
	if n.plan == ws.pl {
		n.ws = ws
	}
	n.mu.Unlock()
}
