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

// Efficiencies used when the site gives none (the site sheets' defaults:
// common practice, no source).
const (
	defaultPumpEfficiency  = 0.70
	defaultMotorEfficiency = 0.90
)

// pumpPlan fills the pump's duty, set-point and energy figures.
func (pl *planner) pumpPlan(ctx context.Context, sol *plant.Solved) error {
	m, s := pl.m, pl.m.Site
	pp := &pl.plan.Pump
	rg := m.Fluid.Density * hydraulics.StandardGravity
	pp.Boundary = s.Boundary.Kind
	pp.SpeedRatio, pp.TrimRatio, pp.AnnualEnergySaving, pp.AnnualCostSaving = math.NaN(), math.NaN(), math.NaN(), math.NaN()
	pp.Currency = s.Currency
	pp.After = OperatingPoint{Flow: sol.TotalFlow(), Differential: sol.PumpDiff(), Speed: pl.plan.Speed}
	pp.After.Head = pp.After.Differential / rg
	if pl.capped && !pl.pump {
		// The speed the drive will run at to hold the set point.
		v := pl.set().SpeedFor(pp.After.Flow, pp.After.Differential, m.Fluid)
		pp.SpeedRatio = min(v, m.MaxSpeed())
		pp.After.Speed = pp.SpeedRatio
	}
	if pl.pump {
		pp.SpeedRatio = pl.plan.Speed
		c := *m.Pump
		c.A0 *= pl.p.PumpHead
		c.A1 *= pl.p.PumpHead
		c.A2 *= pl.p.PumpHead
		// A trim only helps a pump with head to spare: at full speed (or
		// short of the targets) there is nothing to trim. Several pumps
		// are not offered one: which to trim is a choice for the site.
		if pl.plan.Speed < 1 && len(pl.plan.Unmet) == 0 && !m.Several() {
			if d, err := hydraulics.TrimDiameterRatio(c, pp.After.Flow, pp.After.Head); err == nil && d < 1 {
				pp.TrimRatio = d
			}
		}
	}
	pp.Sensor = s.Boundary.Sensor
	if pp.Sensor == "" {
		pp.Sensor = site.AtPump
	}
	pp.SetPoint = sol.PumpDiff()
	if i, ok := m.Index(pp.Sensor); ok && pp.Sensor != site.AtPump {
		pp.SetPoint = sol.BranchDiff(i)
	}

	before, why, err := pl.before(ctx)
	if err != nil {
		return err
	}
	if before != nil {
		pp.HaveBefore = true
		pp.Before = OperatingPoint{Flow: before.TotalFlow(), Differential: before.PumpDiff()}
		pp.Before.Head = pp.Before.Differential / rg
		if pl.capped {
			pp.Before.Speed = before.Speed()
		}
	} else {
		pp.Assumptions = append(pp.Assumptions, "no before figures: "+why)
	}

	etaP, etaM := s.PumpEfficiency, s.MotorEfficiency
	if !(etaP > 0 && etaP <= 1) {
		etaP = defaultPumpEfficiency
		pp.Assumptions = append(pp.Assumptions, fmt.Sprintf("pump efficiency not given: %.0f %% taken (common practice, no source)", 100*etaP))
	}
	if !(etaM > 0 && etaM <= 1) {
		etaM = defaultMotorEfficiency
		pp.Assumptions = append(pp.Assumptions, fmt.Sprintf("motor efficiency not given: %.0f %% taken (common practice, no source)", 100*etaM))
	}
	along := "held constant at both duty points (approximate)"
	if pl.pump {
		along = "held constant at both duty points: a speed change moves the duty along an affinity parabola, on which pump efficiency stays about constant (affinity laws; approximate, it falls at low speed)"
	}
	// Pumps with efficiency points take theirs at their own duty.
	perPump := pl.capped && m.Several() && m.EfficiencyGiven()
	if perPump {
		pp.Assumptions = append(pp.Assumptions, fmt.Sprintf("each pump's efficiency from its points on the pump sheet at its own flow (at a lower speed, at the flow the affinity laws take back to nominal speed: approximate, it falls at low speed); %.0f %% for a pump without points", 100*etaP))
	} else {
		pp.Assumptions = append(pp.Assumptions, fmt.Sprintf("pump efficiency %.0f %% %s", 100*etaP, along))
	}
	pp.Assumptions = append(pp.Assumptions,
		fmt.Sprintf("motor and drive efficiency %.0f %% at both duty points (approximate: it falls at part load)", 100*etaM))
	pl.eta = etaP * etaM
	pp.HydraulicAfter = hydraulics.HydraulicPower(pp.After.Flow, pp.After.Differential)
	pp.ElectricalAfter = pp.HydraulicAfter / (etaP * etaM)
	if pl.capped {
		pp.Pumps, pp.Running, pp.Series = len(m.Pumps), pl.running, m.Series
	}
	if pl.capped && m.Several() {
		pp.Duties = m.Duties(pl.p.PumpHead, pl.running, pp.SpeedRatio, pp.After.Flow, etaP)
		if perPump {
			pp.ElectricalAfter = shaft(pp.Duties, m) / etaM
		}
		pl.fewer(ctx, pp, etaP, etaM, perPump)
	}
	if !pp.HaveBefore {
		return nil
	}
	pp.HydraulicBefore = hydraulics.HydraulicPower(pp.Before.Flow, pp.Before.Differential)
	pp.ElectricalBefore = pp.HydraulicBefore / (etaP * etaM)
	if perPump {
		pp.ElectricalBefore = shaft(m.Duties(pl.p.PumpHead, pl.running, pp.Before.Speed, pp.Before.Flow, etaP), m) / etaM
	}
	if !(s.Hours > 0) || !finite(s.Hours) {
		pp.Assumptions = append(pp.Assumptions, "no running hours given: no annual figures")
		return nil
	}
	// W × h / 1000 = kWh.
	pp.AnnualEnergySaving = (pp.ElectricalBefore - pp.ElectricalAfter) * s.Hours / 1e3

	pp.Assumptions = append(pp.Assumptions, fmt.Sprintf("%.0f running hours a year at the one duty point", s.Hours))
	if finite(s.EnergyPrice) && s.EnergyPrice >= 0 {
		pp.AnnualCostSaving = pp.AnnualEnergySaving * s.EnergyPrice
	}
	return nil
}

// shaft returns the pumps' shaft power at their duties, W.
func shaft(ds []plant.PumpDuty, m *plant.Model) float64 {
	var p float64
	for _, d := range ds {
		p += d.Shaft(m.Fluid)
	}
	return p
}

// fewer works out whether one pump fewer, of those running in parallel,
// gives the plan's duty: the same flow at the same pump differential, so
// every branch keeps its planned flow. The pump that stops is the last one
// running (the pumps start in the pump sheet's order).
func (pl *planner) fewer(ctx context.Context, pp *PumpPlan, etaP, etaM float64, perPump bool) {
	m := pl.m
	if m.Series || pl.running < 2 {
		return
	}
	n := pl.running - 1
	set := m.Set(pl.p.PumpHead, n)
	q, d := pp.After.Flow, pp.After.Differential
	o := &PumpOption{Running: n, Speed: math.NaN(), Electrical: math.NaN(), AnnualEnergySaving: math.NaN(), FlatOutLowest: math.NaN()}
	h, _ := set.AtSpeed(m.MaxSpeed()).Head(q)
	o.Available = h * m.Fluid.Density * hydraulics.StandardGravity
	o.Serves = o.Available >= d*(1-1e-9)
	pp.Fewer = o
	if !o.Serves {
		pl.flatOut(ctx, o, set)
		return
	}
	if o.Speed = min(set.SpeedFor(q, d, m.Fluid), m.MaxSpeed()); !finite(o.Speed) {
		return
	}
	o.Duties = m.Duties(pl.p.PumpHead, n, o.Speed, q, etaP)
	o.Electrical = hydraulics.HydraulicPower(q, d) / (etaP * etaM)
	if perPump {
		o.Electrical = shaft(o.Duties, m) / etaM
	}
	if hrs := m.Site.Hours; hrs > 0 && finite(hrs) {
		o.AnnualEnergySaving = (pp.ElectricalAfter - o.Electrical) * hrs / 1e3
	}
}

// before solves the as-found state: as-found settings at the present speed,
// set-point or measured differential. It returns nil and the reason when
// the boundary of the as-found state is unknown.
func (pl *planner) before(ctx context.Context) (*plant.Solved, string, error) {
	m, s := pl.m, pl.m.Site
	found := m.AsFound()
	// The as-found state has its controllers at their as-found set points.
	planned := pl.setPoints
	pl.setPoints = nil
	defer func() { pl.setPoints = planned }()
	if pl.pump {
		sol, err := pl.solve(ctx, found, m.BaseState().Speed)
		return sol, "", err
	}
	var d float64
	switch s.Boundary.Kind {
	case site.ConstantDiff:
		d = s.Boundary.SetPoint
		if !(d > 0) || !finite(d) {
			return nil, "the present set-point is not given", nil
		}
		if pl.capped {
			return pl.beforeControlled(ctx, found, d)
		}
		if i, ok := m.Index(s.Boundary.Sensor); ok && s.Boundary.Sensor != site.AtPump {
			// The controller holds the sensor branch's differential:
			// find the source differential that gives it.
			set := d
			_, sol, err := pl.root(ctx, found, set, nil, func(sv *plant.Solved) float64 { return sv.BranchDiff(i)/set - 1 }, rootTol)
			return sol, "", err
		}
	default:
		d = math.NaN()
		for _, st := range m.States {
			if st.Differential > 0 && sameSettings(st.Settings, found) {
				d = st.Differential
				break
			}
		}
		if math.IsNaN(d) {
			return nil, "no survey state with the as-found settings gives the pump or header differential", nil
		}
	}
	// d is the pump's differential; the planner's control value is the
	// circuit's friction.
	sol, err := pl.solve(ctx, found, d-pl.lift)
	return sol, "", err
}

func sameSettings(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] && !(math.IsNaN(a[i]) && math.IsNaN(b[i])) {
			return false
		}
	}
	return true
}

// beforeControlled solves the as-found state of a controlled pump: its drive
// raises the speed until the sensor reads the set point d, up to its
// maximum speed, where it runs flat out. The solves are on the pump's curve
// (the planner's own network, rebuilt for the speed as control value).
func (pl *planner) beforeControlled(ctx context.Context, found []float64, d float64) (*plant.Solved, string, error) {
	m := pl.m
	pl.toSpeed()
	read := func(sv *plant.Solved) float64 { return sv.PumpDiff() }
	if i, ok := m.Index(m.Site.Boundary.Sensor); ok && m.Site.Boundary.Sensor != site.AtPump {
		read = func(sv *plant.Solved) float64 { return sv.BranchDiff(i) }
	}
	top, err := pl.solve(ctx, found, m.MaxSpeed())
	if err != nil {
		return nil, "", err
	}
	if read(top) <= d {
		return top, "", nil // flat out and still short of the set point
	}
	_, sol, err := pl.root(ctx, found, m.MaxSpeed(), top, func(sv *plant.Solved) float64 { return read(sv)/d - 1 }, rootTol)
	return sol, "", err
}

// flatOut fills o's flat-out figures: the plan's settings with set's pumps
// at the drive's maximum speed, and how many branches then stay inside the
// tolerance band. Not giving the planned duty (its margins included) is
// not the same as failing the branches: a pump fewer may still keep them
// all in tolerance. Left as it is when the network cannot be solved.
func (pl *planner) flatOut(ctx context.Context, o *PumpOption, set hydraulics.PumpSet) {
	m := pl.m
	l, err := m.Ladder(pl.p, pl.plan.Settings, pl.setPoints)
	if err != nil {
		return
	}
	b, err := m.Build(l, network.Source{Pump: set.AtSpeed(m.MaxSpeed()), Lift: pl.lift})
	if err != nil {
		return
	}
	sol, err := b.Net.Solve(ctx, &network.Options{Initial: pl.flows})
	if err != nil {
		return
	}
	s := &plant.Solved{Model: m, Params: pl.p, State: pl.state(pl.plan.Settings, m.MaxSpeed()), Built: b, Sol: sol}
	lowest := math.Inf(1)
	for _, bp := range pl.plan.Branches {
		i, ok := m.Index(bp.ID)
		if !ok || !(bp.Target > 0) || m.Branches[i].Riser() {
			continue
		}
		pct := 100 * s.Flow(i) / bp.Target
		o.FlatOutBranches++
		if pl.inBand(pct) {
			o.FlatOutInBand++
		}
		lowest = min(lowest, pct)
	}
	if o.FlatOutBranches > 0 {
		o.FlatOutLowest = lowest
	}
}
