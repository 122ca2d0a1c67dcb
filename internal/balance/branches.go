package balance

import (
	"fmt"
	"math"

	"flowset/internal/plant"
)

// Default smallest reliable valve differential when a valve model gives
// none: 3 kPa across a variable-orifice valve, common practice
// (shared/references.md §6).
const defaultMinDiff = 3e3

// lowTravel is the fraction of a valve's range below which a setting is in
// the part of the range where Kv is least certain (common practice, no
// source: handwheel tables are steepest and valve tolerances widest there).
const lowTravel = 0.25

// walk returns the branch indices in walk order: take-off order, the
// sub-branches of a riser before the riser.
func walk(m *plant.Model) []int {
	out := make([]int, 0, len(m.Branches))
	var visit func(ids []int)
	visit = func(ids []int) {
		for _, i := range ids {
			if m.Branches[i].Riser() {
				visit(m.Branches[i].Children)
			}
			out = append(out, i)
		}
	}
	visit(m.Top())
	return out
}

// branches fills the plan's branch list from the final solution.
func (pl *planner) branches(sol *plant.Solved) error {
	m, ex := pl.m, pl.ex
	depth := make([]int, len(m.Branches))
	var setDepth func(ids []int, d int)
	setDepth = func(ids []int, d int) {
		for _, i := range ids {
			depth[i] = d
			setDepth(m.Branches[i].Children, d+1)
		}
	}
	setDepth(m.Top(), 0)
	for _, i := range walk(m) {
		b := &m.Branches[i]
		bp := BranchPlan{
			ID: b.ID, Parent: b.Parent, Depth: depth[i], Riser: b.Riser(), OnIndex: ex.index[i],
			Current: math.NaN(), Exact: math.NaN(), New: math.NaN(), KvRequired: math.NaN(), Authority: math.NaN(),
			Target: ex.q[i], Design: b.Design, Predicted: sol.Flow(i), BranchDiff: sol.BranchDiff(i),
		}
		if b.Riser() {
			var d float64
			for _, c := range b.Children {
				d += m.Branches[c].Design
			}
			bp.Design = d
		}
		bp.Percent = 100 * bp.Predicted / bp.Target
		bp.PercentDesign = 100 * bp.Predicted / bp.Design
		bp.BandLow, bp.BandHigh = bp.Percent, bp.Percent
		bp.InTolerance = pl.inBand(bp.Percent)
		bp.BandInTolerance = bp.InTolerance
		if !finite(bp.Predicted) || !finite(bp.BranchDiff) {
			return fmt.Errorf("branch %q: predicted flow %g m3/s: %w", b.ID, bp.Predicted, ErrSolve)
		}
		if ex.index[i] && b.PI != nil {
			bp.Notes = append(bp.Notes, fmt.Sprintf("index circuit: the pump is set to give this pressure-independent valve its hold differential and %.0f %% (%.1f kPa)", HoldMargin*100, ex.open[i]/1e3))
		} else if ex.index[i] && !b.Riser() {
			bp.Notes = append(bp.Notes, "index circuit: valve fully open, the pump is set for this branch")
		} else if ex.index[i] {
			bp.Notes = append(bp.Notes, "on the index path: valve fully open")
		}
		if pl.starved != nil && pl.starved[i] {
			bp.Notes = append(bp.Notes, fmt.Sprintf("the pump cannot give what this branch needs at target: valve fully open, it gets %.0f %% of target (see the remedies)", bp.Percent))
		}
		if b.PI != nil {
			pl.heldNotes(i, &bp, sol)
		} else if b.Valve != nil {
			pl.valveNotes(i, &bp, sol)
		} else if s := pl.run.surplus[i]; !b.Riser() && s > 0.01*pl.run.avail[i] {
			bp.Notes = append(bp.Notes, fmt.Sprintf("no balancing valve: %.1f kPa more than the branch needs cannot be taken off, so it runs above target", s/1e3))
		}
		pl.plan.Branches = append(pl.plan.Branches, bp)
	}
	return nil
}

func (pl *planner) valveNotes(i int, bp *BranchPlan, sol *plant.Solved) {
	m, ex := pl.m, pl.run
	b := &m.Branches[i]
	if b.ValveModel != nil {
		bp.Valve, bp.Unit = b.ValveModel.Name, b.ValveModel.Unit
		if b.ValveModel.Characteristic != "" {
			bp.Unit = "%"
		}
	}
	bp.Current, bp.Exact, bp.New, bp.KvRequired = b.AsFound, ex.setting[i], pl.plan.Settings[i], ex.kv[i]
	bp.ValveDiff = sol.ValveDiff(i)
	if bp.BranchDiff > 0 {
		bp.Authority = bp.ValveDiff / bp.BranchDiff
	}
	minDiff := pl.opt.MinValveDiff
	if minDiff == 0 && b.ValveModel != nil {
		minDiff = b.ValveModel.MinDiff
	}
	if !(minDiff > 0) {
		minDiff = defaultMinDiff
	}
	if bp.ValveDiff < minDiff {
		bp.Notes = append(bp.Notes, fmt.Sprintf("valve differential %.2f kPa is below the %.1f kPa that reads reliably: the flow reading at this valve is poor", bp.ValveDiff/1e3, minDiff/1e3))
	}
	lo, hi := b.Valve.Range()
	if hi > lo && (bp.New-lo)/(hi-lo) < lowTravel {
		bp.Notes = append(bp.Notes, "setting in the lowest quarter of the valve's range, where its Kv is least certain; a smaller valve would set more precisely")
	}
	if ex.clamped[i] {
		bp.Notes = append(bp.Notes, fmt.Sprintf("valve too large: even fully throttled it passes more than the target (needs Kv %.3g, its lowest is higher); fit a smaller valve", ex.kv[i]))
	}
}

// heldNotes fills a pressure-independent valve's columns: its setting for
// the target flow, the differential it sees at the plan, and notes where it
// is starved below its hold differential or cannot be set to its target.
func (pl *planner) heldNotes(i int, bp *BranchPlan, sol *plant.Solved) {
	ex := pl.run
	b := &pl.m.Branches[i]
	bp.Held = true
	if b.ValveModel != nil {
		bp.Valve, bp.Unit = b.ValveModel.Name, b.ValveModel.Unit
	}
	bp.Current, bp.Exact, bp.New, bp.KvRequired = b.AsFound, ex.setting[i], pl.plan.Settings[i], math.NaN()
	// No authority: the valve's regulator, not its share of the branch
	// differential, decides how it controls.
	bp.ValveDiff = sol.ValveDiff(i)
	if hold := sol.HoldDiff(i); bp.ValveDiff < hold {
		bp.Notes = append(bp.Notes, fmt.Sprintf("pressure-independent valve starved: it sees %.1f kPa, below the %.1f kPa it needs to hold its flow", bp.ValveDiff/1e3, hold/1e3))
	}
	if ex.clamped[i] {
		lo, hi := b.PI.Range()
		qlo, _ := b.PI.Flow.KvAt(lo)
		qhi, _ := b.PI.Flow.KvAt(hi)
		bp.Notes = append(bp.Notes, fmt.Sprintf("the target is outside what the pressure-independent valve can be set to hold (%.3g to %.3g l/s): fit one of another size", qlo*1e3, qhi*1e3))
	}
}

func (pl *planner) inBand(percent float64) bool {
	r := percent / 100
	return r >= 1+pl.lo-1e-9 && r <= 1+pl.hi+1e-9
}

// StarvedReason is the Shortfall.Reason of a branch a design-first plan
// leaves short: its valve (or one below it) fully open.
const StarvedReason = "the pump cannot give what it needs at target: valve fully open"

// shortfalls lists the branches outside the band that the plan cannot
// bring in, each with the remedy that would, and warns about the others.
func (pl *planner) shortfalls() {
	m, run := pl.m, pl.run
	atMax := pl.short || pl.capped && finite(pl.plan.Pump.NeededSpeed) && pl.plan.Pump.NeededSpeed > pl.plan.Pump.MaxSpeed*(1+1e-9)
	var rounding int
	var byID map[string]int // remedies by branch, made on the first shortfall
	var pump int
	for _, bp := range pl.plan.Branches {
		if bp.InTolerance {
			continue
		}
		i, _ := m.Index(bp.ID)
		var reason string
		low := bp.Percent < 100*(1+pl.lo)
		switch {
		case pl.starvedUnder(i):
			reason = StarvedReason
		case pl.short && pl.opt.Share == Proportional && low:
			reason = "pump short of head, shared out in proportion"
		case atMax && low:
			reason = "pump at its maximum speed"
		case run.clamped[i]:
			reason = "valve cannot throttle enough"
		case !m.Branches[i].HasValve() && !bp.Riser:
			reason = "no balancing valve"
		default:
			rounding++
			continue
		}
		sf := Shortfall{ID: bp.ID, Target: bp.Target, Predicted: bp.Predicted, Percent: bp.Percent, Reason: reason, Needs: pl.chain[i], Saves: math.NaN(), AnnualEnergy: math.NaN()}
		if byID == nil {
			byID, pump = pl.remedyIndex()
		}
		if r := pl.remedyFor(i, byID, pump); r != nil {
			sf.Remedy, sf.Saves, sf.AnnualEnergy = r.Action, r.Saves, r.AnnualEnergy
		}
		pl.plan.Unmet = append(pl.plan.Unmet, sf)
	}
	if rounding > 0 {
		w := fmt.Sprintf("%d branches fall outside the band through handwheel rounding", rounding)
		if pl.opt.Rounding == Nearest {
			w += "; smart rounding may bring them in"
		}
		pl.plan.Warnings = append(pl.plan.Warnings, w)
	}
}

// heldTol is how far below its set point a controller's span may read and
// still count as held: the pump is planned for the controllers on the index
// path to sit just at the point where they start to throttle.
const heldTol = 1e-3

// controllers fills the plan of each differential controller from the
// exact plan and the final solution.
func (pl *planner) controllers(sol *plant.Solved) {
	m, ex := pl.m, pl.ex
	if !m.HasControllers() {
		return
	}
	pl.plan.SetPoints = append([]float64(nil), pl.setPoints...)
	for _, i := range walk(m) {
		b := &m.Branches[i]
		if !b.Controlled() {
			continue
		}
		lo, hi := b.Controller.Range()
		cp := ControllerPlan{ID: b.ID, Current: b.Controller.SetPoint, SetPoint: ex.setPoint[i], Least: ex.spanLeast[i],
			Min: lo, Max: hi, OpenDrop: ex.ctrlOpen[i], Throttle: math.NaN(), Span: math.NaN()}
		if d, ok := sol.ControlledDiff(i); ok {
			cp.Span = d
		}
		if c, ok := sol.ControllerElement(i); ok {
			cp.Throttle = c.Throttle(sol.ControllerFlow(i))
		}
		cp.Holding = sol.Holding(i) || cp.Span >= cp.SetPoint*(1-heldTol)
		switch {
		case ex.setPoint[i] > hi:
			cp.Notes = append(cp.Notes, fmt.Sprintf("the span needs %.1f kPa, above the controller's highest set point %.1f kPa: fit a controller with a higher range, or lower the span's resistance", ex.setPoint[i]/1e3, hi/1e3))
			pl.plan.Warnings = append(pl.plan.Warnings, fmt.Sprintf("differential controller on %q: its span needs %.1f kPa, above its highest set point %.1f kPa", b.ID, ex.setPoint[i]/1e3, hi/1e3))
		case ex.setPoint[i] > ex.spanLeast[i]*(1+1e-9):
			cp.Notes = append(cp.Notes, fmt.Sprintf("the span needs only %.1f kPa, below the controller's lowest set point: the partner valve takes the rest", ex.spanLeast[i]/1e3))
		}
		if !(cp.Span >= cp.SetPoint*(1-heldTol)) {
			cp.Notes = append(cp.Notes, "the controller lies wide open at the plan: the source does not give it its set point plus its valve's drop")
		}
		pl.plan.Controllers = append(pl.plan.Controllers, cp)
	}
}
