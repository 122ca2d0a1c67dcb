package network

import (
	"fmt"
	"slices"
	"sync"
)

// maxBandFloats bounds the memory of the banded node matrix (8 bytes each):
// 2^26 floats is 512 MiB.
const maxBandFloats = 1 << 26

// plan is the structure of the node matrix: which nodes are unknown, their
// order in the band and the half bandwidth. It depends on the topology and
// the set of fixed nodes only, so it is reused across solves.
type plan struct {
	nFree    int
	pos      []int // node -> band position, -1 for a fixed node
	pa, pb   []int // per link: band position of its from and to node, -1 if fixed
	from, to []int // per link: its from and to node
	k        int   // half bandwidth
	// sp, when set, replaces the band: positions are in minimum-degree
	// order and the factor is sparse (see sparseAbove).
	sp *sparsePlan
}

// prepare validates the topology and returns the (cached) plan.
func (n *Network) prepare() (*plan, error) {
	if err := n.validateValues(); err != nil {
		return nil, err
	}
	n.mu.Lock()
	defer n.mu.Unlock()
	if n.plan != nil {
		return n.plan, nil
	}
	if n.addErr == nil {
		// A network of the same nodes and links passed the same checks
		// and ordered them the same way.
		if pl := n.orderings.find(n); pl != nil {
			n.plan = pl
			return pl, nil
		}
	}
	if err := n.validateTopology(); err != nil {
		return nil, err
	}
	pl, err := n.newPlan(true)
	if err != nil {
		return nil, err
	}
	n.plan = pl
	n.orderings.add(pl)
	return pl, nil
}

// Orderings keeps the orderings of the node matrix (the reverse
// Cuthill-McKee or minimum-degree order and the sparse factor's structure)
// worked out for networks already solved, so that another network of the
// same nodes and links - the same ladder built again at other settings,
// multipliers or source pressure - takes one instead of ordering its nodes
// again. An ordering depends only on which nodes are held and which nodes
// each link joins, so the one taken is the one the network would work out.
// On a building of a thousand branches a job builds its main network a
// dozen times. Safe for concurrent use; the zero value is empty.
type Orderings struct {
	mu    sync.Mutex
	plans []*plan
}

// maxOrderings bounds the orderings an Orderings keeps (the last ones
// added): a job's networks are of a few shapes.
const maxOrderings = 8

// ShareOrderings makes n take its ordering from o when o holds one for n's
// nodes and links, and add the one it works out otherwise. A nil o shares
// nothing.
func (n *Network) ShareOrderings(o *Orderings) {
	n.mu.Lock()
	n.orderings = o
	n.mu.Unlock()
}

// find returns the ordering o holds for n's topology, or nil.
func (o *Orderings) find(n *Network) *plan {
	if o == nil {
		return nil
	}
	o.mu.Lock()
	defer o.mu.Unlock()
	for _, pl := range o.plans {
		if pl.fits(n) {
			return pl
		}
	}
	return nil
}

// add keeps pl, dropping the oldest beyond maxOrderings.
func (o *Orderings) add(pl *plan) {
	if o == nil {
		return
	}
	o.mu.Lock()
	defer o.mu.Unlock()
	if len(o.plans) == maxOrderings {
		o.plans = append(o.plans[:0], o.plans[1:]...)
	}
	o.plans = append(o.plans, pl)
}

// fits reports whether pl orders n: the same nodes, held the same
// (a held node has no position), and links joining the same nodes.
func (pl *plan) fits(n *Network) bool {
	if len(pl.pos) != len(n.nodeID) || len(pl.from) != len(n.links) {
		return false
	}
	for i, held := range n.fixed {
		if held != (pl.pos[i] < 0) {
			return false
		}
	}
	for i, l := range n.links {
		if pl.from[i] != l.from || pl.to[i] != l.to {
			return false
		}
	}
	return true
}

// newPlan orders the free nodes of a valid topology: reverse Cuthill-McKee
// for the band, or, when sparse is allowed and the band is wide, minimum
// degree for a sparse factor (see sparseAbove).
func (n *Network) newPlan(sparse bool) (*plan, error) {
	nn := len(n.nodeID)
	free := make([]bool, nn)
	for i := range nn {
		free[i] = !n.fixed[i]
	}
	adj := newCSR(nn, n.links, free)
	order := rcm(adj, free)
	pl := &plan{nFree: len(order), pos: make([]int, nn)}
	for i := range pl.pos {
		pl.pos[i] = -1
	}
	for p, node := range order {
		pl.pos[node] = p
	}
	pl.pa = make([]int, len(n.links))
	pl.pb = make([]int, len(n.links))
	pl.from = make([]int, len(n.links))
	pl.to = make([]int, len(n.links))
	for i, l := range n.links {
		a, b := pl.pos[l.from], pl.pos[l.to]
		pl.pa[i], pl.pb[i] = a, b
		pl.from[i], pl.to[i] = l.from, l.to
		if a >= 0 && b >= 0 {
			pl.k = max(pl.k, a-b, b-a)
		}
	}
	if sparse && pl.k > sparseAbove {
		order, cols := minimumDegree(adj, free)
		var nnz int
		for _, c := range cols {
			nnz += len(c)
		}
		if nnz+pl.nFree < pl.nFree*(pl.k+1)/4 {
			for p, node := range order {
				pl.pos[node] = p
			}
			for i, l := range n.links {
				pl.pa[i], pl.pb[i] = pl.pos[l.from], pl.pos[l.to]
			}
			pl.sp = newSparsePlan(cols, pl.pos, n.links)
		}
	}
	if pl.sp == nil && pl.nFree*(pl.k+1) > maxBandFloats {
		return nil, fmt.Errorf("%d unknown pressures with half bandwidth %d after reordering: %w", pl.nFree, pl.k, ErrTooWide)
	}
	return pl, nil
}

// csr is an undirected adjacency list in compressed-row form.
type csr struct {
	off []int
	nb  []int
}

// newCSR returns the adjacency of the nn nodes over links whose ends are both
// kept (keep nil keeps all). Links must have valid, distinct ends.
func newCSR(nn int, links []link, keep []bool) csr {
	use := func(l link) bool { return keep == nil || (keep[l.from] && keep[l.to]) }
	off := make([]int, nn+1)
	for _, l := range links {
		if use(l) {
			off[l.from+1]++
			off[l.to+1]++
		}
	}
	for i := range nn {
		off[i+1] += off[i]
	}
	nb := make([]int, off[nn])
	fill := slices.Clone(off[:nn])
	for _, l := range links {
		if use(l) {
			nb[fill[l.from]] = l.to
			fill[l.from]++
			nb[fill[l.to]] = l.from
			fill[l.to]++
		}
	}
	return csr{off: off, nb: nb}
}

func (c csr) neighbours(i int) []int { return c.nb[c.off[i]:c.off[i+1]] }
func (c csr) degree(i int) int       { return c.off[i+1] - c.off[i] }

// rcm returns the included nodes in reverse Cuthill-McKee order (E. Cuthill
// & J. McKee, "Reducing the bandwidth of sparse symmetric matrices", Proc.
// 24th ACM National Conference, 1969; reversal after A. George, 1971). Each
// connected component starts from a pseudo-peripheral node found by the
// George-Liu level-structure search (A. George & J. W. H. Liu, ACM TOMS 5
// (1979) 284-305), and neighbours are visited in increasing degree.
func rcm(adj csr, include []bool) []int {
	nn := len(include)
	order := make([]int, 0, nn)
	visited := make([]bool, nn)
	stamp := make([]int, nn) // BFS marks for the level-structure search
	cur := 0
	level := make([]int, 0, nn)

	// levels runs a BFS from r within unvisited included nodes and returns
	// the nodes of its last level and the number of levels.
	levels := func(r int) (last []int, depth int) {
		cur++
		level = append(level[:0], r)
		stamp[r] = cur
		start := 0
		for start < len(level) {
			end := len(level)
			depth++
			last = level[start:end]
			for _, v := range level[start:end] {
				for _, w := range adj.neighbours(v) {
					if include[w] && !visited[w] && stamp[w] != cur {
						stamp[w] = cur
						level = append(level, w)
					}
				}
			}
			start = end
		}
		return last, depth
	}

	for s := range nn {
		if !include[s] || visited[s] {
			continue
		}
		// George-Liu pseudo-peripheral node; a few rounds suffice.
		r := s
		last, depth := levels(r)
		for range 8 {
			x := last[0]
			for _, v := range last[1:] {
				if adj.degree(v) < adj.degree(x) {
					x = v
				}
			}
			l2, d2 := levels(x)
			if d2 <= depth {
				break
			}
			r, last, depth = x, l2, d2
		}
		// Cuthill-McKee breadth-first numbering from r.
		head := len(order)
		order = append(order, r)
		visited[r] = true
		for ; head < len(order); head++ {
			v := order[head]
			mark := len(order)
			for _, w := range adj.neighbours(v) {
				if include[w] && !visited[w] {
					visited[w] = true
					order = append(order, w)
				}
			}
			added := order[mark:]
			if len(added) > 1 {
				slices.SortStableFunc(added, func(a, b int) int { return adj.degree(a) - adj.degree(b) })
			}
		}
	}
	slices.Reverse(order)
	return order
}
