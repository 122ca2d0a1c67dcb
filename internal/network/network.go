// Package network solves the steady flows and pressures of a hydronic
// circuit: nodes joined by links, each link a chain of hydraulics elements in
// series, with at least one node held at a fixed pressure (the
// pressurisation point). It builds the common layouts (parallel branches on
// direct- or reverse-return headers, nested risers), gives the system curves
// of combinations of elements, and returns the first-order sensitivities of
// a solution that calibration and balancing need.
//
// Flows are in m3/s, pressures and pressure drops in Pa. A link's flow is
// positive from its first node to its second.
package network

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sync"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
)

// Sentinel causes wrapped by the errors of this package.
var (
	// ErrTopology: the network cannot be solved as drawn (no fixed-pressure
	// node, a part not connected to one, a link from a node to itself, an
	// unknown node index, a duplicate ID).
	ErrTopology = errors.New("invalid network topology")
	// ErrElement: an element returned NaN or Inf, or a value given to the
	// network is not finite.
	ErrElement = errors.New("non-finite value")
	// ErrNoConvergence: the Newton iteration stopped before the residuals
	// met the tolerance; the error is a *ConvergenceError.
	ErrNoConvergence = errors.New("no convergence")
	// ErrTooWide: after reordering, the node matrix is too wide for the
	// banded solver's memory budget.
	ErrTooWide = errors.New("network too wide for the banded solver")
	// ErrInput: an argument has the wrong length or is out of range.
	ErrInput = errors.New("invalid argument")
)

type link struct {
	id       string
	from, to int
	elems    []hydraulics.Element
}

// Network is a set of nodes joined by links. Build it with AddNode and
// AddLink, hold at least one node with FixPressure, then Solve. Elements,
// demands and fixed pressure values may change between solves; the reordering
// of the node matrix is kept until the topology changes.
//
// A Network must not be modified while Solve runs on it. Solve keeps its
// scratch memory (about 150 bytes per link) on the Network for the next
// solve; solves may run concurrently.
type Network struct {
	Fluid fluid.State

	nodeID    []string
	nodeIndex map[string]int
	fixed     []bool
	pfix      []float64
	demand    []float64
	links     []link
	linkIndex map[string]int
	addErr    error // first error found by AddNode/AddLink, reported by Solve

	mu        sync.Mutex
	plan      *plan      // cached ordering; nil after a structural change
	ws        *workspace // Solve's scratch memory for plan, when no Solve holds it
	orderings *Orderings // other networks' orderings to take one from, or nil
}

// New returns an empty network carrying fluid f.
func New(f fluid.State) *Network {
	return &Network{Fluid: f, nodeIndex: map[string]int{}, linkIndex: map[string]int{}}
}

func (n *Network) invalidate() {
	n.mu.Lock()
	n.plan, n.ws = nil, nil
	n.mu.Unlock()
}

func (n *Network) noteErr(err error) {
	if n.addErr == nil {
		n.addErr = err
	}
}

// AddNode adds a node and returns its index. IDs should be unique; a
// duplicate is reported by Solve.
func (n *Network) AddNode(id string) int {
	i := n.addNode(id)
	n.invalidate()
	return i
}

// addNode is AddNode without invalidating the plan, for Build.
func (n *Network) addNode(id string) int {
	if n.nodeIndex == nil {
		n.nodeIndex = map[string]int{}
	}
	i := len(n.nodeID)
	// One map operation for a new ID; a duplicate keeps the first index.
	before := len(n.nodeIndex)
	n.nodeIndex[id] = i
	if len(n.nodeIndex) == before {
		n.nodeIndex[id] = slices.Index(n.nodeID, id)
		n.noteErr(fmt.Errorf("duplicate node id %q: %w", id, ErrTopology))
	}
	n.nodeID = append(n.nodeID, id)
	n.fixed = append(n.fixed, false)
	n.pfix = append(n.pfix, 0)
	n.demand = append(n.demand, 0)
	return i
}

// AddLink adds a link from node from to node to made of elems in series and
// returns its index. Positive flow runs from -> to; the link's pressure drop
// p(from) - p(to) is the sum of its elements' drops. A link without elements
// is an ideal connection (zero drop). Invalid node indices, a link from a
// node to itself and duplicate IDs are reported by Solve.
func (n *Network) AddLink(id string, from, to int, elems ...hydraulics.Element) int {
	i := n.addLink(id, from, to, append([]hydraulics.Element(nil), elems...))
	n.invalidate()
	return i
}

// addLink is AddLink without invalidating the plan, keeping elems (which
// the caller gives up) as the link's elements.
func (n *Network) addLink(id string, from, to int, elems []hydraulics.Element) int {
	if n.linkIndex == nil {
		n.linkIndex = map[string]int{}
	}
	i := len(n.links)
	before := len(n.linkIndex)
	n.linkIndex[id] = i
	if len(n.linkIndex) == before {
		n.linkIndex[id] = slices.IndexFunc(n.links, func(l link) bool { return l.id == id })
		n.noteErr(fmt.Errorf("duplicate link id %q: %w", id, ErrTopology))
	}
	n.links = append(n.links, link{id: id, from: from, to: to, elems: elems})
	return i
}

// SetElements replaces the elements of link i (calibration and balancing
// swap resistances and valve settings between solves). An invalid index is
// reported by Solve.
func (n *Network) SetElements(i int, elems ...hydraulics.Element) {
	if i < 0 || i >= len(n.links) {
		n.noteErr(fmt.Errorf("set elements: link index %d out of range [0, %d): %w", i, len(n.links), ErrInput))
		return
	}
	n.links[i].elems = append(n.links[i].elems[:0:0], elems...)
}

// FixPressure holds node i at pressure p [Pa]. One fixed node is the
// pressurisation point of a closed loop; two fixed nodes with no pump between
// them model a constant-differential boundary (supply held at p0+dp, return
// at p0).
func (n *Network) FixPressure(i int, p float64) {
	if i < 0 || i >= len(n.nodeID) {
		n.noteErr(fmt.Errorf("fix pressure: node index %d out of range [0, %d): %w", i, len(n.nodeID), ErrInput))
		return
	}
	if !n.fixed[i] {
		n.fixed[i] = true
		n.invalidate()
	}
	n.pfix[i] = p
}

// SetDemand sets the external outflow q [m3/s] at node i; the default 0 is a
// closed loop. A demand at a fixed-pressure node has no effect: that node
// supplies or absorbs whatever flow balances it.
func (n *Network) SetDemand(i int, q float64) {
	if i < 0 || i >= len(n.nodeID) {
		n.noteErr(fmt.Errorf("set demand: node index %d out of range [0, %d): %w", i, len(n.nodeID), ErrInput))
		return
	}
	n.demand[i] = q
}

// NumNodes returns the number of nodes.
func (n *Network) NumNodes() int { return len(n.nodeID) }

// NumLinks returns the number of links.
func (n *Network) NumLinks() int { return len(n.links) }

// NodeID returns the ID of node i.
func (n *Network) NodeID(i int) string { return n.nodeID[i] }

// LinkID returns the ID of link i.
func (n *Network) LinkID(i int) string { return n.links[i].id }

// LinkEnds returns the nodes link i runs from and to.
func (n *Network) LinkEnds(i int) (from, to int) { return n.links[i].from, n.links[i].to }

// Elements returns the elements of link i (the network's own slice: do not
// modify it; use SetElements).
func (n *Network) Elements(i int) []hydraulics.Element { return n.links[i].elems }

// NodeIndex returns the index of the node with the given ID.
func (n *Network) NodeIndex(id string) (int, bool) {
	i, ok := n.nodeIndex[id]
	return i, ok
}

// LinkIndex returns the index of the link with the given ID.
func (n *Network) LinkIndex(id string) (int, bool) {
	i, ok := n.linkIndex[id]
	return i, ok
}

// Fixed reports whether node i is held at a fixed pressure, and that pressure.
func (n *Network) Fixed(i int) (p float64, ok bool) { return n.pfix[i], n.fixed[i] }

// Demand returns the external outflow at node i.
func (n *Network) Demand(i int) float64 { return n.demand[i] }

// Validate checks the topology and the given values without solving: every
// link joins two different existing nodes, at least one node has a fixed
// pressure, every node is connected to a fixed-pressure node, and pressures
// and demands are finite.
func (n *Network) Validate() error {
	_, err := n.prepare()
	return err
}

func (n *Network) validateValues() error {
	for i := range n.nodeID {
		if n.fixed[i] && !finite(n.pfix[i]) {
			return fmt.Errorf("node %q: fixed pressure %g: %w", n.nodeID[i], n.pfix[i], ErrElement)
		}
		if !finite(n.demand[i]) {
			return fmt.Errorf("node %q: demand %g: %w", n.nodeID[i], n.demand[i], ErrElement)
		}
	}
	for i := range n.links {
		for k, e := range n.links[i].elems {
			if e == nil {
				return fmt.Errorf("link %q: element %d is nil: %w", n.links[i].id, k, ErrInput)
			}
		}
	}
	return nil
}

// validateTopology checks what the ordering relies on.
func (n *Network) validateTopology() error {
	if n.addErr != nil {
		return n.addErr
	}
	nn := len(n.nodeID)
	for _, l := range n.links {
		if l.from < 0 || l.from >= nn || l.to < 0 || l.to >= nn {
			return fmt.Errorf("link %q: node index out of range [0, %d) (from %d, to %d): %w", l.id, nn, l.from, l.to, ErrTopology)
		}
		if l.from == l.to {
			return fmt.Errorf("link %q runs from node %q to itself: %w", l.id, n.nodeID[l.from], ErrTopology)
		}
	}
	// Breadth-first search from all fixed nodes over the undirected links.
	adj := newCSR(nn, n.links, nil)
	seen := make([]bool, nn)
	queue := make([]int, 0, nn)
	for i := range nn {
		if n.fixed[i] {
			seen[i] = true
			queue = append(queue, i)
		}
	}
	if len(queue) == 0 {
		return fmt.Errorf("no node has a fixed pressure (a closed loop needs its pressurisation point): %w", ErrTopology)
	}
	for h := 0; h < len(queue); h++ {
		for _, j := range adj.neighbours(queue[h]) {
			if !seen[j] {
				seen[j] = true
				queue = append(queue, j)
			}
		}
	}
	for i := range nn {
		if !seen[i] {
			return fmt.Errorf("node %q is not connected to any fixed-pressure node: %w", n.nodeID[i], ErrTopology)
		}
	}
	return nil
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
