package calibrate

import (
	"math"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/site"
)

// TestFitOpenCircuit fits noise-free simulated surveys of open circuits (a
// static lift and an outlet pressure) whose multipliers are away from
// design, without priors, and wants them back to 1e-6 (closed-form truth:
// the simulated plant itself). The pump's curve (and a controller's set
// point) is raised by the lift, so the friction it works against is the
// closed loop's; every pump differential read includes the lift.
func TestFitOpenCircuit(t *testing.T) {
	noPrior := &FitOptions{PriorResistance: math.Inf(1), PriorKv: math.Inf(1), PriorHeader: math.Inf(1), PriorPump: math.Inf(1)}
	const liftM, outletPa = 6.5, 35e3
	for _, c := range richCases() {
		t.Run(c.name, func(t *testing.T) {
			s := newPlantSite(t, c.spec)
			richSurvey(s)
			s.StaticLift, s.OutletPressure = liftM, outletPa
			m := mustModel(t, s)
			lift := m.Fluid.Density*hydraulics.StandardGravity*liftM + outletPa
			if got := m.Lift(); math.Abs(got/lift-1) > 1e-15 {
				t.Fatalf("Lift() = %g Pa, want %g", got, lift)
			}
			for k := range s.Pump {
				s.Pump[k].Head += lift / (m.Fluid.Density * hydraulics.StandardGravity)
			}
			if s.Boundary.Kind == site.ConstantDiff {
				s.Boundary.SetPoint += lift
			}
			m = mustModel(t, s)
			tr := richTruth(t, m, c.spec.seed)
			// Every pump differential read holds the lift and the
			// friction beyond it: the header differential plus the mains.
			for _, r := range s.Readings {
				if r.What == site.PumpDiff && !(r.Value > lift) {
					t.Fatalf("simulated pump differential %g Pa, not above the lift %g Pa", r.Value, lift)
				}
			}
			cal := mustFit(t, m, noPrior)
			check := func(what string, got, want float64) { checkRel(t, what, got, want, 1e-6) }
			for i, b := range cal.Branches {
				if b.Fitted {
					check("resistance ratio of "+b.ID, b.Ratio, tr.p.Resistance[i])
				}
			}
			if cal.Pump.Fitted {
				check("pump head", cal.Pump.Ratio, tr.p.PumpHead)
			}
			for _, rf := range cal.Readings {
				if math.Abs(rf.Residual) > 1e-6*math.Max(math.Abs(rf.Value), 1) {
					t.Errorf("reading %v at %s: predicted %.9g, read %.9g", rf.What, rf.Where, rf.Predicted, rf.Value)
				}
			}
		})
	}
}
