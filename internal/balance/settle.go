package balance

import (
	"context"
	"fmt"
	"math"

	"flowset/internal/hydraulics"
	"flowset/internal/network"
	"flowset/internal/plant"
)

// pumpAt returns the pump element at speed ratio s on its curve (head
// multiplier applied), whatever drives it in the site.
func (pl *planner) pumpAt(s float64) hydraulics.Element {
	if pl.m.Several() {
		return pl.set().AtSpeed(s)
	}
	return hydraulics.Pump{Curve: *pl.m.ScaledPump(pl.p.PumpHead), Speed: s}
}

// set returns the pumps the plan runs, head multiplier applied, at rated
// speed (a set of one for a site of one pump).
func (pl *planner) set() hydraulics.PumpSet { return pl.m.Set(pl.p.PumpHead, pl.running) }

// source returns the network source of control value x: the pump at speed
// x (working against an open circuit's static lift), or an ideal source
// differential x across the circuit's friction.
func (pl *planner) source(x float64) network.Source {
	if pl.bySpeed {
		return network.Source{Pump: pl.pumpAt(x), Lift: pl.lift}
	}
	return network.Source{Differential: x}
}

// maxDiff returns the differential the pump gives at flow q at its maximum
// speed, less an open circuit's static lift, Pa: the most any set point or
// speed can give the circuit's friction (like the exact plan's least
// differential, which is friction alone). +Inf when no pump curve limits
// the source.
func (pl *planner) maxDiff(q float64) float64 {
	if !pl.capped {
		return math.Inf(1)
	}
	d, _ := pl.pumpAt(pl.m.MaxSpeed()).Drop(q, pl.m.Fluid)
	return -d - pl.lift
}

// toSpeed makes the control value a speed ratio on the pump's curve (a
// controlled pump that must run flat out); the network is rebuilt.
func (pl *planner) toSpeed() {
	if pl.bySpeed {
		return
	}
	pl.bySpeed = true
	pl.net, pl.netSettings, pl.flows = nil, nil, nil
}

// settle rounds the settings, re-solves the network and sets the pump: steps
// 5 and 6 of the package comment. It fills the plan's settings and boundary
// and returns the final solution.
func (pl *planner) settle(ctx context.Context) (*plant.Solved, error) {
	ex, m := pl.ex, pl.m
	pp := &pl.plan.Pump
	pp.NeededSpeed, pp.MaxSpeed, pp.Available = math.NaN(), math.NaN(), math.NaN()
	// Needed and Available are at the pump: the static lift besides the
	// index path's friction.
	pp.Needed = ex.least + pl.lift
	if pl.capped {
		pp.MaxSpeed = m.MaxSpeed()
		pp.Available = pl.maxDiff(ex.total()) + pl.lift
		if s, err := pl.speedFor(ex.total(), ex.least); err == nil {
			pp.NeededSpeed = s
		}
		if ex.least > pl.maxDiff(ex.total())+1e-9*pp.Available {
			return pl.settleShort(ctx)
		}
	}
	x0, err := pl.exactControl()
	if err != nil {
		return nil, err
	}
	r := newRounder(pl)
	idx := ex.indexID
	indexOK := func(s *plant.Solved) float64 { return s.Flow(idx)/ex.q[idx] - 1 }
	if c := pl.controlledIndex(); c >= 0 {
		// The index path runs into a controlled span, whose flows stop
		// following the pump once its controller holds: the pump is set
		// for that riser's take-offs to get the set point plus the
		// controller's wide-open drop, where the controller just holds.
		indexOK = func(s *plant.Solved) float64 { return s.BranchDiff(c)/ex.need[c] - 1 }
	} else if m.Branches[idx].PI != nil {
		// A pressure-independent valve gives its flow from its hold
		// differential up: the index is served when its valve sees
		// the differential the exact plan gave it (hold and margin).
		indexOK = func(s *plant.Solved) float64 { return s.ValveDiff(idx)/ex.open[idx] - 1 }
	}
	settings := r.settings()
	x, sol, err := pl.root(ctx, settings, x0, nil, indexOK, rootTol)
	if err != nil {
		return nil, err
	}
	if pl.opt.Rounding == Smart {
		for range 4 {
			if !r.flip(sol) {
				break
			}
			settings = r.settings()
			if x, sol, err = pl.root(ctx, settings, x, nil, indexOK, rootTol); err != nil {
				return nil, err
			}
		}
		if x, sol, err = pl.movePump(ctx, settings, x, sol); err != nil {
			return nil, err
		}
	}
	switch {
	case pl.pump:
		pp.NeededSpeed = x
		if maxSpeed := m.MaxSpeed(); x > maxSpeed*(1+1e-9) {
			x = maxSpeed
			if sol, err = pl.solve(ctx, settings, x); err != nil {
				return nil, err
			}
			pl.plan.Warnings = append(pl.plan.Warnings, fmt.Sprintf("with the settings rounded the pump would need speed ratio %.3f, above its maximum %.3f: the plan runs it at the maximum and some branches fall a little short", pp.NeededSpeed, maxSpeed))
		}
		pl.plan.Speed = x
	case pl.capped:
		// A controlled pump: x is the differential its drive holds, which
		// it can only while its curve at maximum speed lies above it.
		// x is the differential across the circuit's friction; the pump
		// holds it plus the static lift.
		held := x + pl.lift
		pp.NeededSpeed = pl.set().SpeedFor(sol.TotalFlow(), held, m.Fluid)
		if give := pl.maxDiff(sol.TotalFlow()); x > give+1e-9*(give+pl.lift) {
			pl.toSpeed()
			if sol, err = pl.solve(ctx, settings, m.MaxSpeed()); err != nil {
				return nil, err
			}
			pl.plan.Warnings = append(pl.plan.Warnings, fmt.Sprintf("with the settings rounded the circuit needs %.1f kPa, the pump gives %.1f kPa flat out: the set point is what it gives and some branches fall a little short", held/1e3, (give+pl.lift)/1e3))
			held = sol.PumpDiff()
		}
		pl.plan.Differential = held
	default:
		pl.plan.Differential = x + pl.lift
	}
	pl.plan.Settings = settings
	pl.plan.Required = sol.PumpDiff()
	pl.plan.TotalFlow = sol.TotalFlow()
	return sol, nil
}

// movePump tries, where rounding leaves branches outside the band, moving
// the pump until the lowest branch reaches the band's lower edge, or the
// highest its upper edge, and keeps the move only if it brings more
// branches into the band.
func (pl *planner) movePump(ctx context.Context, settings []float64, x float64, sol *plant.Solved) (float64, *plant.Solved, error) {
	m, ex := pl.m, pl.run
	// A valve too large to throttle, or a branch without one, stays out of
	// the band whatever the pump does: leave it out.
	fixable := make([]bool, len(m.Branches))
	var nfix int
	for i := range fixable {
		fixable[i] = !ex.clamped[i] && !(m.Branches[i].Valve == nil && ex.surplus[i] > 0)
		if fixable[i] {
			nfix++
		}
	}
	count := func(s *plant.Solved) int {
		var c int
		for i := range m.Branches {
			if r := s.Flow(i) / ex.q[i]; fixable[i] && r >= 1+pl.lo-1e-9 && r <= 1+pl.hi+1e-9 {
				c++
			}
		}
		return c
	}
	ratio := func(s *plant.Solved, worst func(a, b float64) float64, start float64) float64 {
		w := start
		for i := range m.Branches {
			if fixable[i] {
				w = worst(w, s.Flow(i)/ex.q[i])
			}
		}
		return w
	}
	best := count(sol)
	if best >= nfix {
		return x, sol, nil
	}
	low, high := 1+pl.lo+1e-3, 1+pl.hi-1e-3
	moves := []struct {
		g    func(*plant.Solved) float64
		what string
	}{
		{func(s *plant.Solved) float64 { return ratio(s, math.Min, math.Inf(1))/low - 1 }, "raised until the lowest branch reaches the band"},
		{func(s *plant.Solved) float64 { return ratio(s, math.Max, math.Inf(-1))/high - 1 }, "lowered until the highest branch reaches the band"},
	}
	var why string
	for k, mv := range moves {
		// Only towards the band: raise for a branch below it, lower for one
		// above it.
		if g0 := mv.g(sol); (k == 0) != (g0 < 0) {
			continue
		}
		xm, sm, err := pl.root(ctx, settings, x, sol, mv.g, 1e-6)
		if err != nil {
			return 0, nil, err
		}
		if c := count(sm); c > best {
			best, x, sol, why = c, xm, sm, mv.what
		}
	}
	if why != "" {
		pl.plan.Warnings = append(pl.plan.Warnings, "with the index at target, rounding leaves branches outside the band: the pump is "+why)
	}
	return x, sol, nil
}

// settleShort plans a pump that cannot give the least differential every
// target needs, even at its maximum speed: it runs flat out. Design first
// (the default), the branches that cannot reach their target get their
// valves fully open and every other branch is set for its target at the
// differential the pump then gives; proportional, every valve is set as if
// the pump could serve every target, and all flows fall short together.
func (pl *planner) settleShort(ctx context.Context) (*plant.Solved, error) {
	m := pl.m
	pl.short, pl.plan.Pump.Short = true, true
	if pl.opt.Share == DesignFirst {
		run, starved, err := pl.starve()
		if err != nil {
			return nil, err
		}
		pl.run, pl.starved = run, starved
		var n int
		for i, s := range starved {
			if s && !m.Branches[i].Riser() {
				n++
			}
		}
		pl.plan.Warnings = append(pl.plan.Warnings, fmt.Sprintf("design first: branches that cannot reach their target (%d) get their valves fully open; every other branch is set for its target at what the pump gives", n))
	} else {
		pl.plan.Warnings = append(pl.plan.Warnings, "proportional share-out: every valve is set as if the pump could serve every target, so all branches fall short by about the same fraction")
	}
	pl.toSpeed()
	x := m.MaxSpeed()
	r := newRounder(pl)
	settings := r.settings()
	sol, err := pl.solve(ctx, settings, x)
	if err != nil {
		return nil, err
	}
	if pl.opt.Rounding == Smart && pl.opt.Share == DesignFirst {
		for range 4 {
			if !r.flip(sol) {
				break
			}
			settings = r.settings()
			if sol, err = pl.solve(ctx, settings, x); err != nil {
				return nil, err
			}
		}
	}
	if pl.pump {
		pl.plan.Speed = x
	} else {
		// A controlled pump: the set point is what it gives flat out.
		pl.plan.Differential = sol.PumpDiff()
	}
	pl.plan.Settings = settings
	pl.plan.Required = sol.PumpDiff()
	pl.plan.TotalFlow = sol.TotalFlow()
	return sol, nil
}

// starve works out the design-first plan of a pump short of head: the set
// of branches that cannot reach their target and the flows they then get.
//
// At a source differential D, a branch is starved when the differential its
// chain (its own parts and open valve, its path along the headers, and the
// parts, open valves and paths of the risers above it) needs at its target
// exceeds D; its flow is then the one at which its chain needs exactly D
// (its valve, and those of the risers above it, fully open), and every other
// branch keeps its target, so its chain needs no more than D and its valve
// absorbs the rest. That fixes the circuit's flow Q(D), rising with D; the
// pump at maximum speed gives P(Q), falling with Q, so D = P(Q(D)) has one
// root, between P at the total target flow and the least differential for
// every target: found by regula falsi (Illinois) to a relative 1e-10.
func (pl *planner) starve() (*exact, []bool, error) {
	st := &starver{pl: pl, q: append([]float64(nil), pl.ex.q...), starved: make([]bool, len(pl.ex.q))}
	g := func(d float64) (float64, *exact, error) {
		e, err := st.at(d)
		if err != nil {
			return 0, nil, err
		}
		return d - pl.maxDiff(e.total()), e, nil
	}
	lo, hi := max(pl.maxDiff(pl.ex.total()), 1e-9*pl.ex.least), pl.ex.least
	glo, e, err := g(lo)
	if err != nil {
		return nil, nil, err
	}
	if glo < 0 {
		ghi, eh, err := g(hi)
		if err != nil {
			return nil, nil, err
		}
		e = eh
		side := 0
		for range 200 {
			if !(ghi > 0) || hi-lo <= 1e-10*hi {
				break
			}
			d := (lo*ghi - hi*glo) / (ghi - glo)
			if !(d > lo && d < hi) {
				d = lo + (hi-lo)/2
			}
			var gd float64
			if gd, e, err = g(d); err != nil {
				return nil, nil, err
			}
			if math.Abs(gd) <= 1e-10*d {
				break
			}
			if gd < 0 {
				lo, glo = d, gd
				if side == -1 {
					ghi /= 2
				}
				side = -1
			} else {
				hi, ghi = d, gd
				if side == 1 {
					glo /= 2
				}
				side = 1
			}
		}
	}
	if err := e.settle(); err != nil {
		return nil, nil, err
	}
	e.openStarved(st.starved)
	if st.rough > 0 {
		pl.plan.Warnings = append(pl.plan.Warnings, fmt.Sprintf("design first: the starved branches' flows did not settle (to %.2g in ln); the predicted flows are the network's at these settings", st.rough))
	}
	return e, append([]bool(nil), st.starved...), nil
}

// starver holds the starved set and flows between the source differentials
// starve tries (each solve starts from the last).
type starver struct {
	pl      *planner
	q       []float64
	starved []bool
	rough   float64 // the largest |ln(chain/D)| left where the flows did not settle
}

// at returns the exact plan's needs (newNeeds: its valves not yet
// settled) at source differential d with the starved
// branches' flows set so their chains need d: per branch Newton's method in
// ln q on ln(chain/d), the slope estimated by secant and kept between the
// branch's own share (own/chain: nothing else moves with it, a linear law)
// and 2 (its whole chain moves with it, square law), used only while the
// residual keeps its sign, to 1e-11.
func (st *starver) at(d float64) (*exact, error) {
	pl := st.pl
	m := pl.m
	n := len(m.Branches)
	target := pl.ex.q
	q, starved := st.q, st.starved
	prevLn, prevR := make([]float64, n), make([]float64, n)
	for i := range prevLn {
		prevLn[i] = math.NaN()
	}
	const floor = 1e-6 // of target: a branch the pump cannot reach at all
	for it := 0; ; it++ {
		// Only the needs are read here; starve settles the valves of
		// the plan it keeps.
		e, err := newNeeds(m, pl.p, append([]float64(nil), q...))
		if err != nil {
			return nil, err
		}
		up := e.above()
		var worst float64
		changed := false
		for i := range n {
			if m.Branches[i].Riser() {
				continue
			}
			chain := e.need[i] + e.path[i] + up[i]
			r := math.Log(chain / d)
			if !starved[i] {
				if r <= 1e-9 {
					continue
				}
				starved[i], changed = true, true
				prevLn[i] = math.NaN()
			}
			lnq := math.Log(q[i])
			slope := 2.0
			// The secant only while r keeps its sign: with slope 2 the
			// steps never overshoot, and a sign change means the secant
			// did (other branches moved with this one).
			if finite(prevLn[i]) && lnq != prevLn[i] && (r > 0) == (prevR[i] > 0) {
				lo := (e.fixed[i] + e.open[i]) / chain
				slope = min(max((r-prevR[i])/(lnq-prevLn[i]), lo), 2)
			}
			prevLn[i], prevR[i] = lnq, r
			next := lnq - r/slope
			switch {
			case next >= math.Log(target[i]):
				// It reaches its target after all.
				q[i], starved[i], changed = target[i], false, true
				continue
			case next <= math.Log(floor*target[i]):
				q[i] = floor * target[i]
				continue
			}
			q[i] = math.Exp(next)
			worst = max(worst, math.Abs(r))
		}
		if !changed && worst < 1e-11 {
			return e, nil
		}
		if it == 200 {
			// Not settled (seen only on circuits of micro-litres per
			// second): the network solve gives the flows these settings
			// really give; say so.
			st.rough = max(st.rough, worst)
			return e, nil
		}
	}
}

// controlledIndex returns the first riser on the index path that has a
// differential controller, or -1.
func (pl *planner) controlledIndex() int {
	for _, id := range pl.ex.indexIDs {
		if i, ok := pl.m.Index(id); ok && pl.m.Branches[i].Controlled() {
			return i
		}
	}
	return -1
}
