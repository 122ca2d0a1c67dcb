package plant

import (
	"context"
	"errors"
	"math"
	"testing"

	"flowset/internal/site"
)

// TestFluidAsMeasured checks that properties given in the site sheet take
// the place of the tables: a fluid "other" given the handbook values of
// water at 20 degC is modelled as water at 20 degC. Reference values, as in
// the fluid package's TestWaterHandbook: density 998.2071 kg/m3 (CRC
// Handbook of Chemistry and Physics, "Properties of water in the range
// 0-100 degC"), dynamic viscosity 1.002 mPa s (London South Bank University
// water data page, +-0.5 %).
func TestFluidAsMeasured(t *testing.T) {
	const rho, mu = 998.2071, 1.002e-3
	computed := smallSite()
	mc, err := New(computed)
	if err != nil {
		t.Fatal(err)
	}
	if d := math.Abs(mc.Fluid.Density - rho); d > 0.02 {
		t.Fatalf("computed water density %.4f, want %.4f +- 0.02 (CRC)", mc.Fluid.Density, rho)
	}
	if r := math.Abs(mc.Fluid.Viscosity/mu - 1); r > 0.005 {
		t.Fatalf("computed water viscosity %.4f mPa s, want %.3f +- 0.5 %% (LSBU)", mc.Fluid.Viscosity*1e3, mu*1e3)
	}
	for _, c := range []struct {
		name              string
		fluid             string
		density, dyn, kin float64
		wantRho, wantMu   float64
		rhoTol, muTol     float64 // relative, of the model's predictions
		outsideTable      bool    // temperature set outside the water table
		wantErr           bool
	}{
		{name: "other, dynamic viscosity", fluid: site.OtherFluid, density: rho, dyn: mu, wantRho: rho, wantMu: mu},
		{name: "other, kinematic viscosity", fluid: site.OtherFluid, density: rho, kin: mu / rho, wantRho: rho, wantMu: mu},
		{name: "water, density only", fluid: "water", density: rho, wantRho: rho, wantMu: mc.Fluid.Viscosity},
		{name: "water, viscosity only", fluid: "water", dyn: mu, wantRho: mc.Fluid.Density, wantMu: mu},
		// Given both, the tables are not consulted: a sample at 200 degC
		// (outside the water table) is still modelled.
		{name: "both given outside the table", fluid: "water", density: rho, dyn: mu, wantRho: rho, wantMu: mu, outsideTable: true},
		{name: "other without viscosity", fluid: site.OtherFluid, density: rho, wantErr: true},
	} {
		t.Run(c.name, func(t *testing.T) {
			s := smallSite()
			s.Fluid, s.Density, s.Viscosity, s.KinematicViscosity = c.fluid, c.density, c.dyn, c.kin
			if c.outsideTable {
				s.Temperature = 473.15
			}
			m, err := New(s)
			if c.wantErr {
				if !errors.Is(err, ErrModel) {
					t.Fatalf("New: %v, want ErrModel", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if m.Fluid.Density != c.wantRho || math.Abs(m.Fluid.Viscosity/c.wantMu-1) > 1e-15 {
				t.Errorf("fluid %+v, want density %g, viscosity %g", m.Fluid, c.wantRho, c.wantMu)
			}
			// The same plant on the handbook values predicts what it
			// predicts on the computed water, within the handbook's own
			// tolerances (0.002 % in density, 0.5 % in viscosity: the flows
			// are turbulent, so far less than that).
			sc, err := mc.Solve(context.Background(), mc.Design(), mc.States[0])
			if err != nil {
				t.Fatal(err)
			}
			sm, err := m.Solve(context.Background(), m.Design(), m.States[0])
			if err != nil {
				t.Fatal(err)
			}
			for i := range m.Branches {
				if r := math.Abs(sm.Flow(i)/sc.Flow(i) - 1); r > 1e-3 {
					t.Errorf("branch %s: flow %.6g as measured, %.6g computed (%.2g apart)", m.Branches[i].ID, sm.Flow(i), sc.Flow(i), r)
				}
			}
		})
	}
}

// TestFluidAsMeasuredNotWater checks that a density given as measured is the
// one the pump's head is converted with: a fluid of 1.2 times water's
// density gives 1.2 times the pump differential at shut-off (dp = rho g H,
// the definition of head).
func TestFluidAsMeasuredNotWater(t *testing.T) {
	base, err := New(smallSite())
	if err != nil {
		t.Fatal(err)
	}
	s := smallSite()
	s.Fluid, s.Density, s.Viscosity = site.OtherFluid, 1.2*base.Fluid.Density, base.Fluid.Viscosity
	m, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	got := m.PumpHeadDrop(m.Design(), m.States[0], 0)
	want := 1.2 * base.PumpHeadDrop(base.Design(), base.States[0], 0)
	if math.Abs(got/want-1) > 1e-12 {
		t.Errorf("shut-off differential %g Pa, want %g (1.2 times water's)", got, want)
	}
}
