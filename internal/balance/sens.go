package balance

import (
	"fmt"
	"math"

	"flowset/internal/plant"
)

// ParamKind names the kind of an uncertain multiplier of the calibration.
type ParamKind int

// Kinds of uncertain multipliers (see Uncertainty).
const (
	ResistanceParam ParamKind = iota // a branch's resistance multiplier
	KvParam                          // a branch valve's Kv scale
	HeaderParam                      // the header multiplier
	PumpParam                        // the pump head multiplier
)

// uparam is one uncertain multiplier: its kind, its branch (model index;
// -1 for the header and pump) and the sd of its logarithm.
type uparam struct {
	kind   ParamKind
	branch int
	sigma  float64
}

// sensitivities calls f once per uncertain parameter of u with the change
// of every branch's ln q (by model index) per unit change of the
// parameter's logarithm, at the solution sol of model m with multipliers
// p: the implicit-function sensitivities of the solve, one O(n) solve per
// parameter on a ladder's narrow band. For a multiplier θ on a link's drop,
// ∂Δp/∂ln θ is the drop it scales (the fixed parts for a resistance
// multiplier, all header segments for the header multiplier, the pump's
// negative drop for its head multiplier) and -2 Δp_valve for a Kv scale
// (Δp ∝ Kv⁻²). dlnq is reused between calls.
func sensitivities(m *plant.Model, p plant.Params, u *Uncertainty, sol *plant.Solved, f func(par uparam, dlnq []float64) error) error {
	n := len(m.Branches)
	nl := sol.Built.Net.NumLinks()
	dh := make([]float64, nl)
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
	dlnq := make([]float64, n)
	scratch := make([]float64, sol.Built.Net.NumNodes())
	call := func(par uparam) error {
		if err := sol.Sol.SensitivityFlows(dh, dq, scratch); err != nil {
			return fmt.Errorf("uncertainty band: %w: %w", err, ErrSolve)
		}
		for i := range n {
			dlnq[i] = flowDelta(m, link, i, dq) / flow[i]
		}
		clear(dh)
		return f(par, dlnq)
	}
	for j := range n {
		l := link[j]
		if l < 0 {
			continue
		}
		if j < len(u.LnResistance) && u.LnResistance[j] > 0 {
			if fe := m.FixedElement(j, p.Resistance[j]); fe != nil {
				dh[l], _ = fe.Drop(sol.Flow(j), m.Fluid)
				if err := call(uparam{ResistanceParam, j, u.LnResistance[j]}); err != nil {
					return err
				}
			}
		}
		if j < len(u.LnKvScale) && u.LnKvScale[j] > 0 && m.Branches[j].Valve != nil {
			dh[l] = -2 * sol.ValveDiff(j)
			if err := call(uparam{KvParam, j, u.LnKvScale[j]}); err != nil {
				return err
			}
		}
	}
	if u.LnHeader > 0 && len(sol.Built.Headers) > 0 {
		for _, l := range sol.Built.Headers {
			dh[l] = sol.Sol.Drop[l]
		}
		if err := call(uparam{HeaderParam, -1, u.LnHeader}); err != nil {
			return err
		}
	}
	if u.LnPumpHead > 0 && sol.Built.PumpLink >= 0 {
		// The pump's own drop: the static lift in its link does not
		// scale with the head multiplier.
		dh[sol.Built.PumpLink] = sol.Sol.Drop[sol.Built.PumpLink] - m.Lift()
		if err := call(uparam{PumpParam, -1, u.LnPumpHead}); err != nil {
			return err
		}
	}
	return nil
}

// flowSD returns the sd of every branch's ln q (by model index) at sol
// under u, the parameters taken as independent.
func flowSD(m *plant.Model, p plant.Params, u *Uncertainty, sol *plant.Solved) ([]float64, error) {
	v := make([]float64, len(m.Branches))
	if u == nil {
		return v, nil
	}
	err := sensitivities(m, p, u, sol, func(par uparam, dlnq []float64) error {
		for i, d := range dlnq {
			d *= par.sigma
			v[i] += d * d
		}
		return nil
	})
	for i := range v {
		v[i] = math.Sqrt(v[i])
	}
	return v, err
}

// flowDelta is branch i's share of the link flow changes dq: its link's, or
// a riser without parts' children's summed, as plant.Solved.Flow does
// (link holds each branch's link, -1 for a riser without parts).
func flowDelta(m *plant.Model, link []int, i int, dq []float64) float64 {
	if l := link[i]; l >= 0 {
		return dq[l]
	}
	var s float64
	for _, c := range m.Branches[i].Children {
		s += flowDelta(m, link, c, dq)
	}
	return s
}
