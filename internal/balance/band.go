package balance

import (
	"fmt"
	"math"

	"flowset/internal/plant"
)

// band propagates the calibration's uncertainty to every predicted flow by
// the implicit-function sensitivities of the final solution: one
// Sensitivity per uncertain parameter, each O(n) on a ladder's narrow band.
// For a multiplier θ on a link's drop, ∂Δp/∂ln θ is the drop it scales (the
// fixed parts for a resistance multiplier, all header segments for the
// header multiplier, the pump's negative drop for its head multiplier) and
// -2 Δp_valve for a Kv scale (Δp ∝ Kv⁻²).
func (pl *planner) band(sol *plant.Solved) error {
	u := pl.opt.Uncertainty
	m := pl.m
	n := len(m.Branches)
	nl := sol.Built.Net.NumLinks()
	dh := make([]float64, nl)
	variance := make([]float64, n)
	// Each branch's link and flow, looked up once: this loop runs once per
	// uncertain parameter, and a map lookup per branch in it cost more than
	// the sensitivity solve on large sites.
	link := make([]int, n)
	flow := make([]float64, n)
	for i := range n {
		link[i] = sol.Built.Branch[m.Branches[i].ID]
		flow[i] = sol.Flow(i)
	}
	dq := make([]float64, nl)
	scratch := make([]float64, sol.Built.Net.NumNodes())
	add := func(sigma float64) error {
		if err := sol.Sol.SensitivityFlows(dh, dq, scratch); err != nil {
			return fmt.Errorf("uncertainty band: %w: %w", err, ErrSolve)
		}
		for i := range n {
			d := pl.flowDelta(link, i, dq) / flow[i] * sigma
			variance[i] += d * d
		}
		clear(dh)
		return nil
	}
	for j := range n {
		l := link[j]
		if l < 0 {
			continue
		}
		if j < len(u.LnResistance) && u.LnResistance[j] > 0 {
			if f := m.FixedElement(j, pl.p.Resistance[j]); f != nil {
				dh[l], _ = f.Drop(sol.Flow(j), m.Fluid)
				if err := add(u.LnResistance[j]); err != nil {
					return err
				}
			}
		}
		if j < len(u.LnKvScale) && u.LnKvScale[j] > 0 && m.Branches[j].Valve != nil {
			dh[l] = -2 * sol.ValveDiff(j)
			if err := add(u.LnKvScale[j]); err != nil {
				return err
			}
		}
	}
	if u.LnHeader > 0 && len(sol.Built.Headers) > 0 {
		for _, l := range sol.Built.Headers {
			dh[l] = sol.Sol.Drop[l]
		}
		if err := add(u.LnHeader); err != nil {
			return err
		}
	}
	if u.LnPumpHead > 0 && sol.Built.PumpLink >= 0 {
		// The pump's own drop: the static lift in its link does not
		// scale with the head multiplier.
		dh[sol.Built.PumpLink] = sol.Sol.Drop[sol.Built.PumpLink] - m.Lift()
		if err := add(u.LnPumpHead); err != nil {
			return err
		}
	}
	k := u.Coverage
	if k == 0 {
		k = 2
	}
	pl.plan.Banded = true
	for b := range pl.plan.Branches {
		bp := &pl.plan.Branches[b]
		i, _ := m.Index(bp.ID)
		sd := math.Sqrt(variance[i])
		bp.BandLow, bp.BandHigh = bp.Percent*math.Exp(-k*sd), bp.Percent*math.Exp(k*sd)
		bp.BandInTolerance = pl.inBand(bp.BandLow) && pl.inBand(bp.BandHigh)
	}
	return nil
}

// flowDelta is branch i's share of the link flow changes dq: its link's, or
// a riser without parts' children's summed, as plant.Solved.Flow does
// (link holds each branch's link, -1 for a riser without parts).
func (pl *planner) flowDelta(link []int, i int, dq []float64) float64 {
	if l := link[i]; l >= 0 {
		return dq[l]
	}
	var s float64
	for _, c := range pl.m.Branches[i].Children {
		s += pl.flowDelta(link, c, dq)
	}
	return s
}
