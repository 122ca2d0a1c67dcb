package calibrate

import (
	"math"
	"slices"

	"flowset/internal/lsq"
	"flowset/internal/parallel"
)

// The local Jacobian: an approximation of the fit's Jacobian in which the
// pressures at the take-off nodes of the main ladder are held. Each branch,
// or each riser with its sub-ladder, then responds to its own parameters
// only, through a network of a few nodes solved exactly, so the
// approximation is sparse and cheap while it keeps what makes the
// information matrix hard for conjugate gradients: the near-collinear
// parameters of one branch (its resistance and its valve's Kv seen through
// one flow) and of one riser (the riser and its sub-branches seen through
// their flows). What it leaves out is the response of the main headers and
// the pump, which couples every branch weakly. The engine uses it only as a
// preconditioner (see SparseApprox), so it changes how fast the solves
// converge, never what they converge to.

// maxLocalNodes bounds the nodes of one local network: a larger one (a
// riser with a very long sub-ladder) keeps its nodes held too, which keeps
// the dense factorisations small at the cost of a coarser approximation.
// 128 takes a riser of up to about 60 terminals whole. At 64, the risers
// of 32 terminals or more of a generated building (a third of them at
// 10,000 branches) fell apart into single branches, their riser's
// parameters were left to the diagonal, and the variance probes took 54
// conjugate-gradient iterations each at 1,000 branches and 145 at 10,000
// instead of 14 and 24 (a factor of 128/64 cubed on the few factorisations
// that grow, which cost far less than one probe).
const maxLocalNodes = 128

// localNet is the topology of a state's local networks, fixed with the
// network's.
type localNet struct {
	from, to []int   // link ends
	comp     []int   // node -> local network (-1: held)
	pos      []int   // node -> position within its local network
	nodes    [][]int // per local network, its nodes
	links    [][]int // per local network, the links touching its nodes
	bw       []int   // per local network, the half bandwidth of its node matrix
	// per linearisation
	d    []float64   // floored link slopes
	chol [][]float64 // per local network, its band Cholesky factor (lsq.BandCholesky)
	ix   *obsIndex
	scr  []*localScratch // ApproxJacobian's, one per goroutine
}

// localScratch is one goroutine's scratch of ApproxJacobian: right-hand
// sides per local network, link flow changes, the accumulated column, and
// the entries of the columns it has done.
type localScratch struct {
	rhs           [][]float64
	dq            []float64
	mark          []bool
	acc           []float64 // per observation
	touched       []int
	marked, links []int
	rows, cols    []int
	vals          []float64
}

// scratch returns goroutine w's scratch for m observations.
func (ln *localNet) scratch(w, m int) *localScratch {
	for len(ln.scr) <= w {
		ln.scr = append(ln.scr, nil)
	}
	sc := ln.scr[w]
	if sc == nil {
		sc = &localScratch{rhs: make([][]float64, len(ln.nodes)), dq: make([]float64, len(ln.from)),
			mark: make([]bool, len(ln.nodes))}
		for c, ns := range ln.nodes {
			sc.rhs[c] = make([]float64, len(ns))
		}
		ln.scr[w] = sc
	}
	if len(sc.acc) != m {
		sc.acc = make([]float64, m)
	}
	return sc
}

// ref is term t of observation k's linear functional (stateNet.lin).
type ref struct{ k, t int32 }

// obsIndex lists, per link, node and parameter, the terms of the state's
// observations on it (link flows, node pressures, direct dependences), in
// compressed rows. Their coefficients change with every evaluation and
// their structure mostly does not, but it can: a controlled pump that runs
// flat out in one evaluation and holds its set point in the next changes
// which terms a reading has. shape records the structure the index was
// built for.
type obsIndex struct {
	linkAt, nodeAt, directAt []int
	link, node, direct       []ref
	shape                    []int32
}

// linShape appends the structure of sn's functionals (each one's term
// counts and the links, nodes and parameters they name) to dst.
func linShape(dst []int32, sn *stateNet) []int32 {
	for k := range sn.obs {
		l := &sn.lin[k]
		for _, ts := range [3][]term{l.q, l.p, l.x} {
			dst = append(dst, int32(len(ts)))
			for _, t := range ts {
				dst = append(dst, int32(t.i))
			}
		}
	}
	return dst
}

// sameShape reports whether sn's functionals still have the structure
// shape records, without allocating.
func sameShape(shape []int32, sn *stateNet) bool {
	at := 0
	next := func(v int) bool {
		if at >= len(shape) || shape[at] != int32(v) {
			return false
		}
		at++
		return true
	}
	for k := range sn.obs {
		l := &sn.lin[k]
		for _, ts := range [3][]term{l.q, l.p, l.x} {
			if !next(len(ts)) {
				return false
			}
			for _, t := range ts {
				if !next(t.i) {
					return false
				}
			}
		}
	}
	return at == len(shape)
}

// index returns sn's observation index, built on first use and again
// whenever the functionals' structure has changed since (a stale index
// named terms that were no longer there: an independent plant's trim round
// with its pump flat out in one state crashed on it).
func (ln *localNet) index(sn *stateNet, nparams int) *obsIndex {
	if ln.ix != nil && sameShape(ln.ix.shape, sn) {
		return ln.ix
	}
	ix := &obsIndex{shape: linShape(nil, sn)}
	build := func(size int, terms func(l *lin) []term) ([]int, []ref) {
		at := make([]int, size+1)
		for k := range sn.obs {
			for _, t := range terms(&sn.lin[k]) {
				at[t.i+1]++
			}
		}
		for i := range size {
			at[i+1] += at[i]
		}
		refs := make([]ref, at[size])
		next := append([]int(nil), at[:size]...)
		for k := range sn.obs {
			for e, t := range terms(&sn.lin[k]) {
				refs[next[t.i]] = ref{int32(k), int32(e)}
				next[t.i]++
			}
		}
		return at, refs
	}
	ix.linkAt, ix.link = build(len(ln.from), func(l *lin) []term { return l.q })
	ix.nodeAt, ix.node = build(len(ln.comp), func(l *lin) []term { return l.p })
	ix.directAt, ix.direct = build(nparams, func(l *lin) []term { return l.x })
	ln.ix = ix
	return ix
}

// newLocalNet works out the local networks of state sn.
func (p *problem) newLocalNet(sn *stateNet) *localNet {
	net := sn.built.Net
	nn, nl := net.NumNodes(), net.NumLinks()
	ln := &localNet{from: make([]int, nl), to: make([]int, nl), comp: make([]int, nn), pos: make([]int, nn)}
	held := make([]bool, nn)
	for i := range nn {
		_, held[i] = net.Fixed(i)
	}
	for _, i := range p.m.Top() {
		id := p.m.Branches[i].ID
		held[sn.built.SupplyNode[id]] = true
		held[sn.built.ReturnNode[id]] = true
	}
	// Union-find over links joining two free nodes.
	parent := make([]int, nn)
	for i := range parent {
		parent[i] = i
	}
	var find func(int) int
	find = func(i int) int {
		for parent[i] != i {
			parent[i] = parent[parent[i]]
			i = parent[i]
		}
		return i
	}
	for l := range nl {
		a, b := net.LinkEnds(l)
		ln.from[l], ln.to[l] = a, b
		if !held[a] && !held[b] {
			parent[find(a)] = find(b)
		}
	}
	root := map[int]int{}
	for i := range nn {
		ln.comp[i] = -1
		if held[i] {
			continue
		}
		r := find(i)
		c, ok := root[r]
		if !ok {
			c = len(ln.nodes)
			root[r] = c
			ln.nodes = append(ln.nodes, nil)
		}
		ln.comp[i] = c
		ln.pos[i] = len(ln.nodes[c])
		ln.nodes[c] = append(ln.nodes[c], i)
	}
	for c, ns := range ln.nodes {
		if len(ns) > maxLocalNodes {
			for _, i := range ns {
				ln.comp[i] = -1
			}
			ln.nodes[c] = nil
		}
	}
	ln.links = make([][]int, len(ln.nodes))
	for l := range nl {
		ca, cb := ln.comp[ln.from[l]], ln.comp[ln.to[l]]
		if ca >= 0 {
			ln.links[ca] = append(ln.links[ca], l)
		}
		if cb >= 0 && cb != ca {
			ln.links[cb] = append(ln.links[cb], l)
		}
	}
	// Nodes are numbered in take-off order (network.Build), so a riser's
	// node matrix is a band of a few nodes: factorised as one, its cost
	// grows with the riser's length instead of its cube.
	ln.bw = make([]int, len(ln.nodes))
	for c, ls := range ln.links {
		for _, l := range ls {
			if pa, pb := ln.local(c, ln.from[l]), ln.local(c, ln.to[l]); pa >= 0 && pb >= 0 {
				ln.bw[c] = max(ln.bw[c], pa-pb, pb-pa)
			}
		}
	}
	ln.chol = make([][]float64, len(ln.nodes))
	return ln
}

// factor assembles and factorises every local network's node matrix
// A21 D⁻¹ A12 at the slopes of sn's solution, floored as the network solver
// floors them.
func (ln *localNet) factor(sn *stateNet) bool {
	slope := sn.sol.Slope
	if len(ln.d) != len(slope) {
		ln.d = make([]float64, len(slope))
	}
	var smax float64
	for _, v := range slope {
		smax = max(smax, v)
	}
	floor := 1e-12 * smax
	if !(floor > 0) {
		floor = 1
	}
	for l, v := range slope {
		ln.d[l] = max(v, floor)
	}
	for c, ns := range ln.nodes {
		k := len(ns)
		if k == 0 {
			continue
		}
		w := ln.bw[c] + 1
		a := ln.chol[c]
		if len(a) != k*w {
			a = make([]float64, k*w)
			ln.chol[c] = a
		}
		clear(a)
		for _, l := range ln.links[c] {
			g := 1 / ln.d[l]
			pa, pb := ln.local(c, ln.from[l]), ln.local(c, ln.to[l])
			if pa >= 0 {
				a[pa*w] += g
			}
			if pb >= 0 {
				a[pb*w] += g
			}
			if pa >= 0 && pb >= 0 {
				lo, hi := min(pa, pb), max(pa, pb)
				a[lo*w+hi-lo] -= g
			}
		}
		if !lsq.BandCholesky(a, k, ln.bw[c]) {
			return false
		}
	}
	return true
}

// local returns node's position in local network c, or -1.
func (ln *localNet) local(c, node int) int {
	if ln.comp[node] != c {
		return -1
	}
	return ln.pos[node]
}

// localChunk is the number of parameters ApproxJacobian hands a goroutine
// at a time: enough to make the hand-over cheap, few enough to even out
// the work (a riser's parameters cost more than a single branch's).
const localChunk = 256

// ApproxJacobian implements SparseApprox: the local Jacobian (see above) at
// the latest Residuals call, entries (row, column, value), column by
// column. The columns are worked out on up to p.workers goroutines in
// chunks of parameters, each into its goroutine's scratch, and gathered in
// column order: the same entries in the same order as on one.
func (p opProblem) ApproxJacobian() (rows, cols []int, vals []float64) {
	// The arrays of the last call are handed out again (see
	// lsq.SparseApprox): on a large site they are tens of megabytes a
	// linearisation.
	rows, cols, vals = p.approx.rows[:0], p.approx.cols[:0], p.approx.vals[:0]
	defer func() { p.approx.rows, p.approx.cols, p.approx.vals = rows, cols, vals }()
	_, m := p.Dims()
	np := len(p.params)
	for _, sn := range p.states {
		if len(sn.obs) == 0 || sn.sol == nil {
			continue
		}
		if sn.local == nil {
			sn.local = p.newLocalNet(sn)
		}
		ln := sn.local
		if !ln.factor(sn) {
			continue // leaves the state out: a coarser preconditioner
		}
		ix := ln.index(sn, np)
		type span struct{ w, lo, hi int }
		chunks := make([]span, (np+localChunk-1)/localChunk)
		workers := min(parallel.Workers(p.workers), max(len(chunks), 1))
		scr := make([]*localScratch, workers)
		for w := range workers {
			scr[w] = ln.scratch(w, m)
			scr[w].rows, scr[w].cols, scr[w].vals = scr[w].rows[:0], scr[w].cols[:0], scr[w].vals[:0]
		}
		parallel.For(workers, len(chunks), func(w, k int) {
			sc := scr[w]
			lo := len(sc.rows)
			for j := k * localChunk; j < min((k+1)*localChunk, np); j++ {
				ln.column(p.problem, sn, ix, sc, j)
			}
			chunks[k] = span{w, lo, len(sc.rows)}
		})
		total := len(rows)
		for _, sc := range scr {
			total += len(sc.rows)
		}
		rows, cols, vals = slices.Grow(rows, total-len(rows)), slices.Grow(cols, total-len(cols)), slices.Grow(vals, total-len(vals))
		for _, c := range chunks {
			sc := scr[c.w]
			rows = append(rows, sc.rows[c.lo:c.hi]...)
			cols = append(cols, sc.cols[c.lo:c.hi]...)
			vals = append(vals, sc.vals[c.lo:c.hi]...)
		}
	}
	return rows, cols, vals
}

// column appends to sc the entries of column j of the local Jacobian of
// state sn: the local networks j's drops reach solved with their take-offs
// held, and the observations' functionals applied to the result.
func (ln *localNet) column(p *problem, sn *stateNet, ix *obsIndex, sc *localScratch, j int) {
	acc, rhs, dq := sc.acc, sc.rhs, sc.dq
	add := func(oi int, v float64) {
		if v == 0 {
			return
		}
		if acc[oi] == 0 {
			sc.touched = append(sc.touched, oi)
		}
		acc[oi] += v
		if acc[oi] == 0 {
			acc[oi] = math.SmallestNonzeroFloat64 // keep it listed once
		}
	}
	addq := func(l int, v float64) {
		if dq[l] == 0 {
			sc.links = append(sc.links, l)
		}
		dq[l] += v
		if dq[l] == 0 {
			dq[l] = math.SmallestNonzeroFloat64
		}
	}
	sc.marked, sc.links = sc.marked[:0], sc.links[:0]
	for _, t := range sn.dh[j] {
		l := t.i
		g := t.c / ln.d[l]
		addq(l, -g)
		for _, e := range [2]struct {
			node int
			s    float64
		}{{ln.from[l], g}, {ln.to[l], -g}} {
			c := ln.comp[e.node]
			if c < 0 {
				continue
			}
			if !sc.mark[c] {
				sc.mark[c] = true
				sc.marked = append(sc.marked, c)
			}
			rhs[c][ln.pos[e.node]] += e.s
		}
	}
	for _, c := range sc.marked {
		x := rhs[c]
		lsq.BandCholSolve(ln.chol[c], len(x), ln.bw[c], x)
		for _, l := range ln.links[c] {
			var xa, xb float64
			if q := ln.local(c, ln.from[l]); q >= 0 {
				xa = x[q]
			}
			if q := ln.local(c, ln.to[l]); q >= 0 {
				xb = x[q]
			}
			addq(l, -(xb-xa)/ln.d[l])
		}
		for q, node := range ln.nodes[c] {
			for _, rf := range ix.node[ix.nodeAt[node]:ix.nodeAt[node+1]] {
				add(sn.obs[rf.k], sn.lin[rf.k].p[rf.t].c*x[q])
			}
		}
		clear(x)
		sc.mark[c] = false
	}
	for _, l := range sc.links {
		for _, rf := range ix.link[ix.linkAt[l]:ix.linkAt[l+1]] {
			add(sn.obs[rf.k], sn.lin[rf.k].q[rf.t].c*dq[l])
		}
		dq[l] = 0
	}
	for _, rf := range ix.direct[ix.directAt[j]:ix.directAt[j+1]] {
		add(sn.obs[rf.k], sn.lin[rf.k].x[rf.t].c)
	}
	for _, oi := range sc.touched {
		sc.rows = append(sc.rows, oi)
		sc.cols = append(sc.cols, j)
		sc.vals = append(sc.vals, acc[oi]/p.obs[oi].sigma)
		acc[oi] = 0
	}
	sc.touched = sc.touched[:0]
}
