package plant

import (
	"errors"
	"fmt"
	"math"
	"strconv"

	"flowset/internal/site"
)

// Thresholds of the physical checks.
const (
	// MaxVelocity is the branch and header velocity above which erosion,
	// noise and measurement trouble are likely: common practice for
	// hydronic pipework, no single source (design guides quote 1-3 m/s).
	MaxVelocity = 3.0 // m/s
	// DefaultMinDiff is the smallest valve differential that reads reliably
	// when a valve model does not state one: common practice for variable-
	// orifice valves (about 3 kPa), no single source.
	DefaultMinDiff = 3000.0 // Pa
)

// ErrPhysics is the cause of problems that are physically impossible.
var ErrPhysics = errors.New("physically impossible")

// ErrSuspicious is the cause of warnings about values that are possible but
// unlikely.
var ErrSuspicious = errors.New("suspicious value")

// Check returns the physical problems of a site's model: impossible values
// as errors, suspicious ones as warnings. Structural problems are the site
// package's business.
func (m *Model) Check() site.Problems {
	var out site.Problems
	add := func(pos site.Pos, field, value string, sev site.Severity, cause error, msg, want string) {
		out = append(out, &site.Error{File: pos.File, Line: pos.Line, Field: field, Value: value, Severity: sev, Err: cause, Msg: msg, Want: want})
	}
	for i, b := range m.Branches {
		pos := m.Site.Branches[i].Pos
		if b.Bore > 0 {
			v := b.Design / (math.Pi * b.Bore * b.Bore / 4)
			if v > MaxVelocity {
				add(pos, "design flow", num(b.Design*1000)+" l/s", site.SeverityWarning, ErrSuspicious,
					fmt.Sprintf("velocity %.2f m/s in branch %s's pipe at design flow", v, b.ID), fmt.Sprintf("at most %.0f m/s: check the pipe size", MaxVelocity))
			}
		}
		if b.PI != nil {
			// A pressure-independent valve that cannot be set to hold
			// its branch's target: the plan can only clamp it.
			lo, hi := b.PI.Range()
			qlo, err1 := b.PI.Flow.KvAt(lo)
			qhi, err2 := b.PI.Flow.KvAt(hi)
			if err1 == nil && err2 == nil && (b.Target < qlo || b.Target > qhi) {
				add(pos, "valve", b.ValveModel.Name, site.SeverityWarning, ErrSuspicious,
					fmt.Sprintf("branch %s's target %s l/s is outside the %s to %s l/s the pressure-independent valve can be set to hold", b.ID, num(b.Target*1000), num(qlo*1000), num(qhi*1000)),
					"a valve model whose settings cover the target flow")
			}
		}
	}
	var qmax float64
	if m.Pump != nil {
		if q, err := m.Set(1, 0).AtSpeed(maxSpeed(m.Site)).MaxFlow(); err == nil {
			// Every pump running, as none can give more.
			qmax = q
		}
		for i, fit := range m.PumpFits {
			if !fit.Poor {
				continue
			}
			which := "the pump points"
			if id := m.PumpIDs[i]; id != "" {
				which = "pump " + id + "'s points"
			}
			add(site.Pos{File: "pump.csv"}, "head", "", site.SeverityWarning, ErrSuspicious,
				fmt.Sprintf("%s fit a quadratic curve poorly (largest residual %.1f %% of shut-off head)", which, 100*fit.MaxRelResidual),
				"points read from one pump curve at one speed")
		}
	}
	held := m.heldFlows()
	for ri, r := range m.Site.Readings {
		switch {
		case r.What == site.Flow && held[ri] > 0 && r.Value > (1+HeldExcess)*held[ri]:
			add(r.Pos, "value", num(r.Value*1000)+" l/s", site.SeverityWarning, ErrSuspicious,
				fmt.Sprintf("flow more than %.0f %% above the %s l/s the branch's pressure-independent valve holds at its setting", HeldExcess*100, num(held[ri]*1000)),
				"the setting the valve really had, or check the valve model: such a valve passes no more than its setting's flow")
		case r.What.IsFlow() && qmax > 0 && r.Value > qmax:
			add(r.Pos, "value", num(r.Value*1000)+" l/s", site.SeverityError, ErrPhysics,
				fmt.Sprintf("flow above the %.3g l/s the pump can give at its highest speed", qmax*1000), "a flow the pump can deliver: check the reading and its unit")
		case r.What == site.ValveDiff:
			min := DefaultMinDiff
			if i, ok := m.index[r.Where]; ok && m.Branches[i].ValveModel != nil && m.Branches[i].ValveModel.MinDiff > 0 {
				min = m.Branches[i].ValveModel.MinDiff
			}
			if r.Value < min {
				add(r.Pos, "value", num(r.Value/1000)+" kPa", site.SeverityWarning, ErrSuspicious,
					fmt.Sprintf("valve differential below %.3g kPa reads unreliably", min/1000), "a larger differential (close the valve a little, or rely on a flow meter)")
			}
		}
	}
	return out
}

// HeldExcess is how far a flow read through a pressure-independent valve
// may exceed the flow its setting holds before check warns: 15 %, beyond the
// valve's own tolerance and a clamp-on meter's (common practice, no source).
const HeldExcess = 0.15

// heldFlows returns, per reading, the flow the pressure-independent valve of
// its branch holds at the reading's state's setting (0 where there is none).
func (m *Model) heldFlows() []float64 {
	out := make([]float64, len(m.Site.Readings))
	for _, st := range m.States {
		for _, ri := range st.Readings {
			i, ok := m.index[m.Site.Readings[ri].Where]
			if !ok || m.Branches[i].PI == nil {
				continue
			}
			if q, err := m.Branches[i].PI.Flow.KvAt(st.Settings[i]); err == nil {
				out[ri] = q
			}
		}
	}
	return out
}

func maxSpeed(s *site.Site) float64 {
	if s.Boundary.MaxSpeed > 0 {
		return s.Boundary.MaxSpeed
	}
	return 1
}

func num(x float64) string { return strconv.FormatFloat(x, 'g', 4, 64) }
