package balance

import (
	"context"
	"fmt"
	"math"

	"flowset/internal/hydraulics"
	"flowset/internal/network"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// Default tolerance band when the site gives none, as fractions of target
// (±10 %: shared/references.md §6, the usual specification).
const (
	defaultToleranceLow  = -0.10
	defaultToleranceHigh = 0.10
)

// planner carries one Compute call.
type planner struct {
	m   *plant.Model
	p   plant.Params
	opt Options
	// lift is an open circuit's static head at the pump, Pa (0 for a
	// closed loop). The planner works in the circuit's friction (the
	// exact plan, control values without a pump curve); what it reports
	// at the pump includes the lift.
	lift float64
	// pump: the boundary is a pump curve; capped: a pump curve limits
	// the source (a pump boundary or a controlled pump); bySpeed: the
	// control value of the solves is a speed ratio on the pump's curve
	// (else an ideal source differential).
	pump, capped, bySpeed bool
	// running is how many of the model's pumps the plan runs (the site's
	// pumps running); relative is set when each has its own fixed speed,
	// and the plan's speed is then a ratio to those speeds.
	running  int
	relative bool
	lo, hi   float64
	// ex is the exact plan for every target; run the one the settings
	// come from: ex itself, or, when the pump cannot serve every target
	// and design-first is asked, the plan with the starved branches open
	// (starved marks them).
	ex, run *exact
	starved []bool
	short   bool      // the pump cannot give every target
	eta     float64   // pump × motor efficiency (set by pumpPlan)
	chain   []float64 // per branch, the source differential its chain needs at every target
	plan    *Plan
	// The network kept between solves (see solve).
	net         *network.Built
	netSettings []float64
	flows       []float64
	// setPoints are the controllers' set points the solves use (nil: as
	// found), netSetPoints those on the kept network.
	setPoints, netSetPoints []float64
}

// Compute works out a balancing plan for model m with multipliers p (the
// design's, m.Design(), or a calibration's). See the package comment for the
// method.
func Compute(ctx context.Context, m *plant.Model, p plant.Params, opt *Options) (*Plan, error) {
	if m == nil || m.Site == nil {
		return nil, fmt.Errorf("no model: %w", ErrInput)
	}
	pl := &planner{m: m, p: p}
	if opt != nil {
		pl.opt = *opt
	}
	if err := pl.check(); err != nil {
		return nil, err
	}
	q, err := pl.targets()
	if err != nil {
		return nil, err
	}
	pl.ex, err = newExact(m, p, q)
	if err != nil {
		return nil, err
	}
	pl.lo, pl.hi = m.Site.ToleranceLow, m.Site.ToleranceHigh
	if !(pl.lo < pl.hi) || !finite(pl.lo) || !finite(pl.hi) {
		pl.lo, pl.hi = defaultToleranceLow, defaultToleranceHigh
	}
	pl.pump = m.Site.Boundary.Kind == site.PumpCurve && m.Pump != nil
	pl.capped = m.PumpDriven()
	pl.bySpeed = pl.pump
	pl.running = m.Site.Running("")
	if n := min(max(pl.running, 0), len(m.Pumps)); pl.capped && m.Several() && n > 0 {
		_, pl.relative = hydraulics.PumpSet{Members: m.Pumps[:n]}.Relative()
	}
	pl.run = pl.ex
	pl.lift = m.Lift()
	if m.HasControllers() {
		pl.setPoints = append([]float64(nil), pl.ex.setPoint...)
	}
	pl.plan = &Plan{
		Rounding: pl.opt.Rounding, Share: pl.opt.Share, Least: pl.ex.least, Index: m.Branches[pl.ex.indexID].ID,
		IndexPath: pl.ex.indexIDs, ToleranceLow: pl.lo, ToleranceHigh: pl.hi,
	}
	if pl.relative {
		pl.plan.Warnings = append(pl.plan.Warnings, "every pump the plan runs has its own speed on the pump sheet: the plan's pump speed is a ratio to those speeds, each drive turned by it (100 % is as found)")
	}
	sol, err := pl.settle(ctx)
	if err != nil {
		return nil, err
	}
	if err := pl.branches(sol); err != nil {
		return nil, err
	}
	pl.controllers(sol)
	if err := pl.pumpPlan(ctx, sol); err != nil {
		return nil, err
	}
	pl.plan.LeastHigh = pl.ex.least
	if pl.opt.Uncertainty != nil {
		if err := pl.band(sol); err != nil {
			return nil, err
		}
		pl.robust()
	}
	pl.bypasses()
	pl.remedies()
	pl.plan.Needs = make([]Need, len(m.Branches))
	for i := range pl.plan.Needs {
		pl.plan.Needs[i] = Need{Chain: pl.chain[i], Fixed: pl.ex.fixed[i], OpenValve: pl.ex.open[i]}
	}
	pl.shortfalls()
	pl.atPump()
	return pl.plan, nil
}

// atPump adds an open circuit's static lift to the plan's least
// differentials, which the exact plan works out as friction alone: the
// plan reports every source differential at the pump.
func (pl *planner) atPump() {
	if pl.lift == 0 {
		return
	}
	p := pl.plan
	p.Least += pl.lift
	p.LeastHigh += pl.lift
	p.LeastRemedied += pl.lift // NaN stays NaN
	for i := range p.Remedies {
		r := &p.Remedies[i]
		r.Need += pl.lift
		r.NeedAfter += pl.lift
		r.Least += pl.lift
		r.LeastAfter += pl.lift
	}
}

func (pl *planner) check() error {
	n := len(pl.m.Branches)
	p := pl.p
	if len(p.Resistance) != n || len(p.KvScale) != n {
		return fmt.Errorf("multipliers for %d and %d branches, model has %d: %w", len(p.Resistance), len(p.KvScale), n, ErrInput)
	}
	for i := range n {
		if !(p.Resistance[i] > 0) || !finite(p.Resistance[i]) || !(p.KvScale[i] > 0) || !finite(p.KvScale[i]) {
			return fmt.Errorf("branch %q: multipliers %g, %g must be positive and finite: %w", pl.m.Branches[i].ID, p.Resistance[i], p.KvScale[i], ErrInput)
		}
	}
	if !(p.Header > 0) || !finite(p.Header) || !(p.PumpHead > 0) || !finite(p.PumpHead) {
		return fmt.Errorf("header and pump multipliers %g, %g must be positive and finite: %w", p.Header, p.PumpHead, ErrInput)
	}
	if pl.opt.Scale == 0 {
		pl.opt.Scale = 1
	}
	if !(pl.opt.Scale > 0) || !finite(pl.opt.Scale) {
		return fmt.Errorf("target scale %g must be positive: %w", pl.opt.Scale, ErrInput)
	}
	if pl.opt.MinValveDiff < 0 || !finite(pl.opt.MinValveDiff) {
		return fmt.Errorf("minimum valve differential %g Pa must be positive: %w", pl.opt.MinValveDiff, ErrInput)
	}
	if pl.opt.Rounding != Nearest && pl.opt.Rounding != Smart {
		return fmt.Errorf("rounding mode %d: %w", int(pl.opt.Rounding), ErrInput)
	}
	if pl.opt.Share != DesignFirst && pl.opt.Share != Proportional {
		return fmt.Errorf("share-out policy %d: %w", int(pl.opt.Share), ErrInput)
	}
	if u := pl.opt.Uncertainty; u != nil {
		if len(u.LnResistance) != 0 && len(u.LnResistance) != n || len(u.LnKvScale) != 0 && len(u.LnKvScale) != n {
			return fmt.Errorf("uncertainty for %d and %d branches, model has %d: %w", len(u.LnResistance), len(u.LnKvScale), n, ErrInput)
		}
		for _, v := range append(append([]float64{u.LnHeader, u.LnPumpHead, u.Coverage}, u.LnResistance...), u.LnKvScale...) {
			if !(v >= 0) || math.IsInf(v, 1) {
				return fmt.Errorf("uncertainty %g must be a non-negative standard deviation: %w", v, ErrInput)
			}
		}
	}
	return nil
}

// targets returns every terminal branch's target flow (risers' are summed
// later).
func (pl *planner) targets() ([]float64, error) {
	m := pl.m
	q := make([]float64, len(m.Branches))
	for id := range pl.opt.Targets {
		if _, ok := m.Index(id); !ok {
			return nil, fmt.Errorf("target for unknown branch %q: %w", id, ErrInput)
		}
	}
	for i := range m.Branches {
		b := &m.Branches[i]
		t, over := pl.opt.Targets[b.ID]
		if b.Riser() {
			if over {
				return nil, fmt.Errorf("target for riser %q: a riser carries the sum of its sub-branches: %w", b.ID, ErrInput)
			}
			continue
		}
		if !over {
			t = b.Target * pl.opt.Scale
		}
		if !(t > 0) || !finite(t) {
			return nil, fmt.Errorf("branch %q: target flow %g m3/s must be positive: %w", b.ID, t, ErrInput)
		}
		q[i] = t
	}
	return q, nil
}

// state returns the plant state for settings at control value x: the speed
// ratio with a pump curve, else the source differential.
func (pl *planner) state(settings []float64, x float64) plant.State {
	st := plant.State{Label: "plan", Settings: settings, SetPoints: pl.setPoints}
	if pl.bySpeed {
		st.Speed = x
	} else {
		// A plant state's differential is the pump's: friction and the
		// static lift of an open circuit.
		st.Differential = x + pl.lift
	}
	return st
}

// solve solves the plant at settings and control value x. The plan solves
// the same network many times with a few valves or the pump changed, so it
// keeps one built network, swaps the changed elements in place and warm-starts
// Newton's method from the last flows; the result is what plant.Solve gives
// (TestProperties compares them).
func (pl *planner) solve(ctx context.Context, settings []float64, x float64) (*plant.Solved, error) {
	st := pl.state(append([]float64(nil), settings...), x)
	m, p := pl.m, pl.p
	if !pl.bySpeed && !(x > 0 && finite(x)) {
		return nil, fmt.Errorf("source differential %g Pa must be positive: %w", x, ErrSolve)
	}
	src := pl.source(x)
	if pl.net == nil {
		l, err := m.Ladder(p, st.Settings, st.SetPoints)
		if err != nil {
			return nil, fmt.Errorf("%w: %w", ErrSolve, err)
		}
		b, err := m.Build(l, src)
		if err != nil {
			return nil, fmt.Errorf("%w: %w", ErrSolve, err)
		}
		pl.net, pl.netSettings = b, append([]float64(nil), st.Settings...)
		pl.netSetPoints = st.SetPoints
	} else {
		n := pl.net.Net
		moved := !sameSettings(pl.netSetPoints, st.SetPoints)
		for i, v := range st.Settings {
			if v == pl.netSettings[i] || (math.IsNaN(v) && math.IsNaN(pl.netSettings[i])) {
				continue
			}
			if l := pl.net.Branch[m.Branches[i].ID]; l >= 0 {
				n.SetElements(l, m.Elements(i, p, v)...)
			}
			pl.netSettings[i] = v
			moved = true
		}
		if moved && len(pl.net.Controller) > 0 {
			// A controller's element holds its span's flow at the set
			// point, which the span's settings change.
			for i := range m.Branches {
				c, ok, err := m.ControllerIn(i, p, st)
				if err != nil {
					return nil, fmt.Errorf("%w: %w", ErrSolve, err)
				}
				if ok {
					n.SetElements(pl.net.Controller[m.Branches[i].ID], c)
				}
			}
			pl.netSetPoints = st.SetPoints
		}
		if pl.net.PumpLink >= 0 {
			n.SetElements(pl.net.PumpLink, src.PumpElements()...)
		} else if k, ok := n.NodeIndex(network.SupplyID); ok {
			n.FixPressure(k, src.Static+src.Held())
		}
	}
	if pl.flows == nil {
		pl.flows = pl.targetFlows()
	}
	opt := &network.Options{Initial: pl.flows}
	sol, err := pl.net.Net.Solve(ctx, opt)
	if err != nil && ctx.Err() == nil {
		sol, err = pl.net.Net.Solve(ctx, nil) // cold start
	}
	if err != nil {
		return nil, fmt.Errorf("%w: state %q: %w", ErrSolve, st.Label, err)
	}
	pl.flows = sol.Flow
	return &plant.Solved{Model: m, Params: p, State: st, Built: pl.net, Sol: sol}, nil
}

// targetFlows returns the link flows of the exact plan (every branch at
// target, header segments by continuity), the first solve's starting point.
func (pl *planner) targetFlows() []float64 {
	b, ex := pl.net, pl.run
	q := make([]float64, b.Net.NumLinks())
	for i, br := range pl.m.Branches {
		if l := b.Branch[br.ID]; l >= 0 {
			q[l] = ex.q[i]
		}
		if l, ok := b.Net.LinkIndex(br.ID + ".supply-header"); ok {
			q[l] = ex.supFlow[i]
		}
		if l, ok := b.Net.LinkIndex(br.ID + ".return-header"); ok {
			q[l] = ex.retFlow[i]
		}
	}
	if b.PumpLink >= 0 {
		q[b.PumpLink] = ex.total()
	}
	for id, l := range b.Controller {
		i, _ := pl.m.Index(id)
		q[l] = ex.q[i]
	}
	return q
}

// control converts between the control value (speed ratio, or source
// differential) and u, in which flows are about proportional: u = s for a
// pump (affinity laws), u = √Δp for a differential (square law).
func (pl *planner) toU(x float64) float64 {
	if pl.bySpeed {
		return x
	}
	return math.Sqrt(x)
}

func (pl *planner) fromU(u float64) float64 {
	if pl.bySpeed {
		return u
	}
	return u * u
}

// exactControl returns the control value at which the source gives the
// least differential at the total target flow.
func (pl *planner) exactControl() (float64, error) {
	if !pl.bySpeed {
		return pl.ex.least, nil
	}
	return pl.speedFor(pl.ex.total(), pl.ex.least)
}

// speedFor returns the speed ratio at which the pump element (as the plant
// builds it, head multiplier and curve limits included) gives differential
// dp at flow q: bracketing, then bisection to machine precision.
//
// dp is the circuit's friction: the pump gives it plus the static lift.
func (pl *planner) speedFor(q, dp float64) (float64, error) {
	dp += pl.lift
	f := func(s float64) float64 {
		d, _ := pl.pumpAt(s).Drop(q, pl.m.Fluid)
		return -d - dp
	}
	// The larger root of the quadratic, as a start.
	c := *pl.m.Pump
	a0, a1, a2 := c.A0*pl.p.PumpHead, c.A1*pl.p.PumpHead*q, c.A2*pl.p.PumpHead*q*q-dp/(pl.m.Fluid.Density*hydraulics.StandardGravity)
	s0 := 1.0
	if disc := a1*a1 - 4*a0*a2; disc >= 0 && a0 > 0 {
		if r := (-a1 + math.Sqrt(disc)) / (2 * a0); r > 0 {
			s0 = r
		}
	}
	lo, hi := s0, s0
	for k := 0; f(hi) < 0; k++ {
		if k > 200 {
			return 0, fmt.Errorf("no pump speed gives %g Pa at %g m3/s: %w", dp, q, ErrSolve)
		}
		hi *= 1.25
	}
	for k := 0; f(lo) > 0; k++ {
		if k > 200 {
			return 0, fmt.Errorf("no pump speed gives %g Pa at %g m3/s: %w", dp, q, ErrSolve)
		}
		lo /= 1.25
	}
	for range 200 {
		mid := lo + (hi-lo)/2
		if mid <= lo || mid >= hi {
			break
		}
		if f(mid) < 0 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return hi, nil
}

// root finds the control value at which g(solution) = 0, g increasing with
// the control value, to |g| < tol, starting from x0 (s0 is the solution
// there when the caller has it, else nil). Flows are about proportional to
// u, so the first step scales u by 1/(1+g) when g is a flow ratio less one;
// then the secant method inside the bracket found, bisecting when it leaves
// it.
func (pl *planner) root(ctx context.Context, settings []float64, x0 float64, s0 *plant.Solved, g func(*plant.Solved) float64, tol float64) (float64, *plant.Solved, error) {
	u0 := pl.toU(x0)
	if s0 == nil {
		var err error
		if s0, err = pl.solve(ctx, settings, x0); err != nil {
			return 0, nil, err
		}
	}
	g0 := g(s0)
	if math.Abs(g0) < tol {
		return x0, s0, nil
	}
	ulo, uhi := math.NaN(), math.NaN()
	bracket := func(u, v float64) {
		if v < 0 {
			ulo = max(u, nanTo(ulo, u))
		} else {
			uhi = min(u, nanTo(uhi, u))
		}
	}
	bracket(u0, g0)
	u1 := u0 / (1 + g0)
	if !(u1 > 0) || !finite(u1) {
		u1 = u0 * 2
		if g0 > 0 {
			u1 = u0 / 2
		}
	}
	for range 60 {
		s1, err := pl.solve(ctx, settings, pl.fromU(u1))
		if err != nil {
			return 0, nil, err
		}
		g1 := g(s1)
		if math.Abs(g1) < tol || (finite(ulo) && finite(uhi) && uhi-ulo < 1e-13*uhi) {
			return pl.fromU(u1), s1, nil
		}
		bracket(u1, g1)
		next := u1 - g1*(u1-u0)/(g1-g0)
		if !finite(next) || next <= 0 {
			next = u1 / (1 + g1)
		}
		if finite(ulo) && finite(uhi) && !(next > ulo && next < uhi) {
			next = ulo + (uhi-ulo)/2
		}
		if math.Abs(next-u1) <= 1e-13*u1 {
			return pl.fromU(u1), s1, nil
		}
		u0, g0, u1 = u1, g1, next
	}
	return 0, nil, fmt.Errorf("pump control did not converge: %w", ErrSolve)
}

func nanTo(v, d float64) float64 {
	if math.IsNaN(v) {
		return d
	}
	return v
}

// rootTol is the relative accuracy to which the pump is set for the index's
// target: far below any reading, well above the solver's tolerance.
const rootTol = 1e-9
