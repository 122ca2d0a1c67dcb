package balance

import (
	"context"
	"errors"
	"math"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// pumpedParallel is parallelSite driven by a pump whose curve (invented)
// lies above the balanced circuit's need at design flow.
func pumpedParallel() *site.Site {
	s := parallelSite()
	s.Boundary = site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 2, SetPoint: nan, Sensor: site.AtPump}
	s.Pump = []site.PumpPoint{{Flow: 0, Head: 6}, {Flow: 1.2e-3, Head: 5.5}, {Flow: 2.4e-3, Head: 4}}
	s.PumpEfficiency, s.MotorEfficiency = 0.6, 0.9
	s.Hours, s.EnergyPrice, s.Currency = 3000, 0.25, "EUR"
	return s
}

// TestAffinity checks the pump plan against the affinity laws: with pure
// square-law branches on ideal headers, targets scaled by 1.2 leave every
// Kv unchanged (surplus × 1.44, flow × 1.2), so the duty moves along the
// system parabola and the pump speed scales by 1.2, its differential by
// 1.44 and the hydraulic power by 1.728 — the worked example of
// shared/references.md §5.1 (1000 → 1200 rpm: 100 → 120 m3/h, 40 → 57.6 m,
// 10 → 17.28 kW).
func TestAffinity(t *testing.T) {
	m := mustModel(t, pumpedParallel())
	for _, mode := range []RoundMode{Nearest, Smart} {
		t.Run(mode.String(), func(t *testing.T) {
			base := mustCompute(t, m, m.Design(), &Options{Rounding: mode})
			up := mustCompute(t, m, m.Design(), &Options{Rounding: mode, Scale: 1.2})
			for _, c := range []struct {
				name      string
				got, want float64
				tolerance float64
			}{
				{"speed", up.Speed / base.Speed, 1.2, 1e-6},
				{"flow", up.Pump.After.Flow / base.Pump.After.Flow, 1.2, 1e-6},
				{"differential", up.Required / base.Required, 57.6 / 40, 1e-6},
				{"hydraulic power", up.Pump.HydraulicAfter / base.Pump.HydraulicAfter, 17.28 / 10, 1e-6},
			} {
				if math.Abs(c.got/c.want-1) > c.tolerance {
					t.Errorf("%s ratio = %.9f, want %.6f (affinity laws)", c.name, c.got, c.want)
				}
			}
			for i := range base.Settings {
				if base.Settings[i] != up.Settings[i] && !(math.IsNaN(base.Settings[i]) && math.IsNaN(up.Settings[i])) {
					t.Errorf("setting %d: %g at scale 1, %g at 1.2; want equal", i, base.Settings[i], up.Settings[i])
				}
			}
		})
	}
}

// TestPumpPlan checks the pump figures against their definitions: the plan's
// duty lies on the pump curve at the plan's speed (affinity laws,
// hydraulics.PumpCurve.AtSpeed), the trimmed impeller's curve passes through
// it (diameter affinity: A0 d² + A1 q d + A2 q² = H), powers are q·Δp over
// the efficiencies, and the annual figures are the power difference times
// the hours and the price.
func TestPumpPlan(t *testing.T) {
	s := pumpedParallel()
	m := mustModel(t, s)
	pl := mustCompute(t, m, m.Design(), &Options{Rounding: Smart})
	pp := pl.Pump
	c := *m.Pump
	q, h := pp.After.Flow, pp.After.Head
	if got := c.AtSpeed(pl.Speed).Head(q); math.Abs(got-h) > 1e-9*h {
		t.Errorf("curve at speed %.6f gives %.9g m at the planned flow, plan says %.9g m", pl.Speed, got, h)
	}
	if !(pp.TrimRatio > 0 && pp.TrimRatio < 1) {
		t.Fatalf("TrimRatio = %g, want in (0, 1)", pp.TrimRatio)
	}
	d := pp.TrimRatio
	if got := c.A0*d*d + c.A1*q*d + c.A2*q*q; math.Abs(got-h) > 1e-9*h {
		t.Errorf("trimmed curve gives %.9g m at the duty, want %.9g", got, h)
	}
	if !pp.HaveBefore {
		t.Fatal("no before figures with a pump curve")
	}
	// Before: as-found settings (all at 4 turns = open) at speed 1.
	before, err := m.Solve(context.Background(), m.Design(), plant.State{Settings: m.AsFound(), Speed: 1})
	if err != nil {
		t.Fatal(err)
	}
	rows := []struct {
		name      string
		got, want float64
	}{
		{"before flow", pp.Before.Flow, before.TotalFlow()},
		{"before differential", pp.Before.Differential, before.PumpDiff()},
		{"hydraulic before", pp.HydraulicBefore, before.TotalFlow() * before.PumpDiff()},
		{"hydraulic after", pp.HydraulicAfter, q * pl.Required},
		{"electrical before", pp.ElectricalBefore, before.TotalFlow() * before.PumpDiff() / (0.6 * 0.9)},
		{"electrical after", pp.ElectricalAfter, q * pl.Required / (0.6 * 0.9)},
		{"annual kWh", pp.AnnualEnergySaving, (pp.ElectricalBefore - pp.ElectricalAfter) * 3000 / 1000},
		{"annual cost", pp.AnnualCostSaving, pp.AnnualEnergySaving * 0.25},
		{"head", pp.After.Head, pl.Required / (m.Fluid.Density * hydraulics.StandardGravity)},
	}
	for _, r := range rows {
		if math.Abs(r.got-r.want) > 1e-9*math.Abs(r.want) {
			t.Errorf("%s = %.9g, want %.9g", r.name, r.got, r.want)
		}
	}
	if !(pp.AnnualEnergySaving > 0) {
		t.Errorf("annual saving %g kWh: balancing an all-open circuit and slowing the pump should save energy", pp.AnnualEnergySaving)
	}
	// No price: no cost line.
	s.EnergyPrice = nan
	m = mustModel(t, s)
	if pl := mustCompute(t, m, m.Design(), nil); !math.IsNaN(pl.Pump.AnnualCostSaving) {
		t.Errorf("AnnualCostSaving = %g without a price, want NaN", pl.Pump.AnnualCostSaving)
	}
}

// TestRemoteSensor checks a constant-differential boundary whose sensor is
// at a branch: the new set-point is that branch's differential at the plan,
// and the before state holds the present set-point there.
func TestRemoteSensor(t *testing.T) {
	ctx := context.Background()
	s := parallelSite()
	s.Header = site.DirectReturn
	for i := range s.Branches {
		s.Branches[i].SupplyLength, s.Branches[i].ReturnLength, s.Branches[i].HeaderBore = 5, 5, 0.02
	}
	s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 45e3, Sensor: "c"}
	m := mustModel(t, s)
	pl := mustCompute(t, m, m.Design(), nil)
	sol, err := m.Solve(ctx, m.Design(), pl.State())
	if err != nil {
		t.Fatal(err)
	}
	if got, want := pl.Pump.SetPoint, sol.BranchDiff(2); math.Abs(got-want) > 1e-9*want {
		t.Errorf("SetPoint = %.9g Pa, want branch c's differential %.9g", got, want)
	}
	if !(pl.Pump.SetPoint < pl.Required) {
		t.Errorf("set-point at the far branch %g Pa not below the source differential %g", pl.Pump.SetPoint, pl.Required)
	}
	before, err := m.Solve(ctx, m.Design(), plant.State{Settings: m.AsFound(), Differential: pl.Pump.Before.Differential})
	if err != nil {
		t.Fatal(err)
	}
	if got := before.BranchDiff(2); math.Abs(got-45e3) > 1e-6*45e3 {
		t.Errorf("before: branch c sees %.9g Pa, want the present set-point 45000", got)
	}
}

// TestComputeErrors checks the input errors.
func TestComputeErrors(t *testing.T) {
	s := parallelSite()
	m := mustModel(t, s)
	short := m.Design()
	short.Resistance = short.Resistance[:2]
	zero := m.Design()
	zero.KvScale[1] = 0
	for _, c := range []struct {
		name string
		m    *plant.Model
		p    plant.Params
		opt  *Options
	}{
		{"nil model", nil, m.Design(), nil},
		{"short params", m, short, nil},
		{"zero Kv scale", m, zero, nil},
		{"negative scale", m, m.Design(), &Options{Scale: -1}},
		{"unknown target", m, m.Design(), &Options{Targets: map[string]float64{"zz": 1e-3}}},
		{"zero target", m, m.Design(), &Options{Targets: map[string]float64{"a": 0}}},
		{"bad rounding", m, m.Design(), &Options{Rounding: RoundMode(7)}},
		{"negative sd", m, m.Design(), &Options{Uncertainty: &Uncertainty{LnHeader: -1}}},
		{"short sd", m, m.Design(), &Options{Uncertainty: &Uncertainty{LnResistance: []float64{1}}}},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Compute(context.Background(), c.m, c.p, c.opt)
			if !errors.Is(err, ErrInput) {
				t.Errorf("Compute: error %v, want ErrInput", err)
			}
		})
	}
}
