package calibrate

import (
	"fmt"
	"math"
	"slices"

	"flowset/internal/hydraulics"
	"flowset/internal/network"
	"flowset/internal/plant"
)

// Differential controllers in the fit. A controller's element holds the
// flow its span passes at the set point (hydraulics.DiffController.Hold),
// which depends on the parameters of every branch and header segment in
// the span: setControllers works it out again whenever they move, and
// controllerTerms adds to each such parameter's link-drop derivatives the
// controller link's share, -k ∂Hold/∂x while it holds (k its throttling
// slope). ∂Hold/∂x comes from the span solved alone at its set point: one
// adjoint solve of its source flow gives ∂Hold/∂(drop of every span link),
// applied to the parameter's terms on the same links (matched by link ID).
// Controllers are taken deepest first, so an inner controller's own term
// is on its link before the outer span's derivative reads it.

// setControllers puts the controllers of multipliers pp on state sn's
// network.
func (p *problem) setControllers(sn *stateNet, pp plant.Params) {
	for _, i := range p.controlled() {
		c, _, err := p.m.ControllerIn(i, pp, sn.st)
		if err != nil {
			// Keep the last element; the solve that follows reports
			// trouble, and a span that cannot be solved alone at its set
			// point is outside the fit's domain anyway.
			continue
		}
		sn.built.Net.SetElements(sn.built.Controller[p.m.Branches[i].ID], c)
	}
}

// controlled returns the controlled risers, deepest first.
func (p *problem) controlled() []int {
	var out []int
	depth := map[int]int{}
	for i := range p.m.Branches {
		if !p.m.Branches[i].Controlled() {
			continue
		}
		d := 0
		for k := i; ; d++ {
			par, ok := p.m.Index(p.m.Branches[k].Parent)
			if !ok {
				break
			}
			k = par
		}
		depth[i] = d
		out = append(out, i)
	}
	slices.SortStableFunc(out, func(a, b int) int { return depth[b] - depth[a] })
	return out
}

// controllerTerms adds the controllers' terms to sn.dh (see above).
func (p *problem) controllerTerms(sn *stateNet) {
	if len(sn.built.Controller) == 0 {
		return
	}
	net := sn.built.Net
	for _, i := range p.controlled() {
		id := p.m.Branches[i].ID
		cl := sn.built.Controller[id]
		c, ok := net.Elements(cl)[0].(hydraulics.DiffController)
		if !ok || !c.Holding(sn.sol.Flow[cl]) {
			continue // wide open: its drop does not depend on Hold
		}
		g, span, err := p.holdGradient(sn, i)
		if err != nil {
			continue
		}
		k := c.SetPoint / (hydraulics.ControllerDroop * c.Hold)
		for j := range sn.dh {
			var dHold float64
			for _, t := range sn.dh[j] {
				if s, ok := span[t.i]; ok {
					dHold += g[s] * t.c
				}
			}
			if dHold != 0 {
				sn.dh[j] = append(sn.dh[j], term{cl, -k * dHold})
			}
		}
	}
}

// holdGradient returns ∂Hold/∂(drop of each link) of riser i's span solved
// alone, and the map from the state network's links to the span's.
func (p *problem) holdGradient(sn *stateNet, i int) ([]float64, map[int]int, error) {
	b, sol, err := p.m.Span(p.ctx, i, sn.params, sn.st)
	if err != nil {
		return nil, nil, err
	}
	wq := make([]float64, b.Net.NumLinks())
	if b.MainLink >= 0 {
		wq[b.MainLink] = 1
	} else {
		sup, _ := b.Net.NodeIndex(network.SupplyID)
		for l := range wq {
			switch from, to := b.Net.LinkEnds(l); sup {
			case from:
				wq[l] = 1
			case to:
				wq[l] = -1
			}
		}
	}
	g, err := sol.SensitivityT(wq, make([]float64, b.Net.NumNodes()))
	if err != nil {
		return nil, nil, fmt.Errorf("held flow of %q: %w", p.m.Branches[i].ID, err)
	}
	riser := p.m.Branches[i].ID
	span := map[int]int{}
	net := sn.built.Net
	for l := range b.Net.NumLinks() {
		name := b.Net.LinkID(l)
		if l == b.MainLink {
			name = riser
		}
		if ml, ok := net.LinkIndex(name); ok {
			span[ml] = l
		}
	}
	return g, span, nil
}

// setPointTerm returns the link-drop derivative of riser i's set point
// parameter (ln of the multiplier on its as-found set point): on its
// controller's link while it holds, -k ∂Hold/∂x + (q - Hold) ∂k/∂x, Hold's
// derivative by central differences of the span solved alone (two solves;
// a closed form would need the span's own source sensitivity, which the
// network does not offer); nothing while it lies wide open.
func (p *problem) setPointTerm(sn *stateNet, i int) []term {
	cl, ok := sn.built.Controller[p.m.Branches[i].ID]
	if !ok {
		return nil
	}
	c, ok := sn.built.Net.Elements(cl)[0].(hydraulics.DiffController)
	q := sn.sol.Flow[cl]
	if !ok || !c.Holding(q) {
		return nil
	}
	const h = 1e-4
	hold := func(f float64) float64 {
		pp := sn.params.Clone()
		if pp.SetPoint == nil {
			pp.SetPoint = make([]float64, len(p.m.Branches))
			for k := range pp.SetPoint {
				pp.SetPoint[k] = 1
			}
		}
		pp.SetPoint[i] *= f
		e, _, err := p.m.ControllerIn(i, pp, sn.st)
		if err != nil {
			return math.NaN()
		}
		return e.Hold
	}
	up, dn := hold(math.Exp(h)), hold(math.Exp(-h))
	dHold := (up - dn) / (2 * h)
	if !finite(dHold) {
		return nil
	}
	k := c.SetPoint / (hydraulics.ControllerDroop * c.Hold)
	// k = S/(δ Hold): ∂k/∂ln S = k (1 - ∂ln Hold/∂ln S).
	dk := k * (1 - dHold/c.Hold)
	return []term{{cl, -k*dHold + (q-c.Hold)*dk}}
}
