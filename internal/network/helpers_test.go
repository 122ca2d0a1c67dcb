package network

import (
	"context"
	"math"
	"testing"

	"flowset/internal/fluid"
)

// Test elements with exact laws, independent of package hydraulics.

// quad is a square-law resistance dp = r q|q| (fully turbulent, Kv-type).
type quad struct{ r float64 }

func (e quad) Drop(q float64, _ fluid.State) (float64, float64) {
	return e.r * q * math.Abs(q), 2 * e.r * math.Abs(q)
}

// lin is a laminar resistance dp = r q.
type lin struct{ r float64 }

func (e lin) Drop(q float64, _ fluid.State) (float64, float64) { return e.r * q, e.r }

// pumpQuad is a pump with gain h0 - a q|q| (a gain is a negative drop).
type pumpQuad struct{ h0, a float64 }

func (e pumpQuad) Drop(q float64, _ fluid.State) (float64, float64) {
	return -(e.h0 - e.a*q*math.Abs(q)), 2 * e.a * math.Abs(q)
}

// offset adds a constant drop c: the additive perturbation of a link's drop
// used by the finite-difference oracle of Sensitivity.
type offset struct{ c float64 }

func (e offset) Drop(float64, fluid.State) (float64, float64) { return e.c, 0 }

// nanElem returns NaN, as a broken element would.
type nanElem struct{}

func (nanElem) Drop(float64, fluid.State) (float64, float64) { return math.NaN(), 0 }

// water20 is water at 20 °C: density and viscosity from references §1.3
// (IF97 / IAPWS 2008 columns, 998.2061 kg/m3, 1.0016 mPa s).
var water20 = fluid.State{Temperature: 293.15, Density: 998.2061, Viscosity: 1.0016e-3}

func relErr(got, want float64) float64 {
	if want == 0 {
		return math.Abs(got)
	}
	return math.Abs(got-want) / math.Abs(want)
}

func mustSolve(t testing.TB, n *Network, opt *Options) *Solution {
	t.Helper()
	sol, err := n.Solve(context.Background(), opt)
	if err != nil {
		t.Fatalf("Solve: %v", err)
	}
	return sol
}

// checkBalance verifies, independently of the solver's own residuals,
// continuity at every free node and the energy equation around every loop:
// potentials are propagated along a spanning tree with the element drops
// recomputed at the solution flows, and every link not in the tree (each
// closes one fundamental loop) and every fixed node (pseudo-loops between
// fixed pressures) must agree with them. tol is relative to the largest flow
// and the largest drop.
func checkBalance(t *testing.T, n *Network, sol *Solution, tol float64) {
	t.Helper()
	nn, nl := n.NumNodes(), n.NumLinks()
	drop := make([]float64, nl)
	var qmax, hmax float64
	for i := range nl {
		for _, e := range n.Elements(i) {
			d, _ := e.Drop(sol.Flow[i], n.Fluid)
			drop[i] += d
		}
		qmax = max(qmax, math.Abs(sol.Flow[i]))
		hmax = max(hmax, math.Abs(drop[i]))
	}
	// Continuity.
	imb := make([]float64, nn)
	for i := range nl {
		a, b := n.LinkEnds(i)
		imb[a] -= sol.Flow[i]
		imb[b] += sol.Flow[i]
	}
	for j := range nn {
		if _, fixed := n.Fixed(j); fixed {
			continue
		}
		if r := math.Abs(imb[j] - n.Demand(j)); r > tol*qmax {
			t.Errorf("continuity at node %q: imbalance %g m3/s, max flow %g", n.NodeID(j), r, qmax)
		}
	}
	// Loops: spanning tree from node 0 over undirected links.
	adj := make([][]int, nn)
	for i := range nl {
		a, b := n.LinkEnds(i)
		adj[a] = append(adj[a], i)
		adj[b] = append(adj[b], i)
	}
	phi := make([]float64, nn)
	seen := make([]bool, nn)
	inTree := make([]bool, nl)
	var pmax float64
	for root := range nn {
		if seen[root] {
			continue
		}
		seen[root] = true
		stack := []int{root}
		for len(stack) > 0 {
			v := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			for _, i := range adj[v] {
				a, b := n.LinkEnds(i)
				w := a + b - v
				if seen[w] {
					continue
				}
				seen[w], inTree[i] = true, true
				if w == b { // walking along the link: p_b = p_a - drop
					phi[w] = phi[v] - drop[i]
				} else {
					phi[w] = phi[v] + drop[i]
				}
				stack = append(stack, w)
			}
		}
	}
	for i := range nl {
		if inTree[i] {
			continue
		}
		a, b := n.LinkEnds(i)
		if r := math.Abs(drop[i] - (phi[a] - phi[b])); r > tol*hmax {
			t.Errorf("loop closed by link %q: energy sum %g Pa, max drop %g", n.LinkID(i), r, hmax)
		}
	}
	ref := -1
	for j := range nn {
		p, fixed := n.Fixed(j)
		pmax = max(pmax, math.Abs(p))
		if !fixed {
			continue
		}
		if ref < 0 {
			ref = j
			continue
		}
		pr, _ := n.Fixed(ref)
		if r := math.Abs((phi[j] - phi[ref]) - (p - pr)); r > tol*hmax+1e-15*pmax {
			t.Errorf("path between fixed nodes %q and %q: energy sum %g Pa", n.NodeID(ref), n.NodeID(j), r)
		}
	}
}
