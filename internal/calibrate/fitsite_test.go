package calibrate

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// Invented plants for the fit tests (the synthetic-site generator was not
// available when these were written). All data are invented.

// testValve is an invented handwheel table, Kv in m3/h at 1 bar per turn.
var testValve = site.ValveModel{Name: "V20", Unit: "turns", Settings: []float64{0, 1, 2, 3, 4},
	Kv: []float64{0.25, 0.9, 1.9, 3.0, 3.9}, Step: 0.1}

type plantSpec struct {
	branches    int
	arrangement site.Arrangement
	riser       bool // branch 1 becomes a riser feeding two sub-branches
	constDiff   bool // a constant differential instead of a pump curve
	// pumps splits the pump into two unequal ones, "parallel" or
	// "series", whose combined curve passes near the one pump's duty.
	pumps string
	// bypass makes branch b01 a three-port terminal (bypass valve V20 at
	// 2.5 turns) read in its bypass position in the second state.
	bypass bool
	seed   uint64
}

// newPlantSite builds an invented site with every branch a pipe, fittings,
// a terminal and a V20 valve, on DN50 headers, with a pump whose curve
// passes near the design duty. It has no readings.
func newPlantSite(tb testing.TB, sp plantSpec) *site.Site {
	tb.Helper()
	rng := rand.New(rand.NewPCG(sp.seed, 1))
	nan := math.NaN()
	s := &site.Site{
		Name: "invented", Fluid: "water", Temperature: 273.15 + 20, Header: sp.arrangement,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan},
		Valves:   []site.ValveModel{testValve},
	}
	if sp.constDiff {
		s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 60e3, Sensor: "pump"}
	}
	var total float64 // design flow still to come, for sizing long headers
	for i := range sp.branches {
		b := site.Branch{
			ID: fmt.Sprintf("b%02d", i), DesignFlow: (0.2 + 0.4*rng.Float64()) * 1e-3,
			PipeBore: 0.021, PipeLength: 10 + 30*rng.Float64(), Roughness: 4.5e-5, FittingsK: 3 + 5*rng.Float64(),
			TerminalDrop: (10 + 20*rng.Float64()) * 1e3, TerminalFlow: nan,
			Valve: "V20", Setting: 2 + 0.1*math.Round(20*rng.Float64()),
			SupplyLength: 4, ReturnLength: 4, HeaderBore: 0.053, HeaderK: 1,
		}
		b.TerminalFlow = b.DesignFlow
		total += b.DesignFlow
		s.Branches = append(s.Branches, b)
	}
	if sp.branches > 20 {
		// A long header is sized for about 1 m/s along its length.
		for i := range s.Branches {
			s.Branches[i].HeaderBore = math.Sqrt(4 * total / math.Pi)
			total -= s.Branches[i].DesignFlow
		}
	}
	if sp.riser && sp.branches >= 3 {
		// Branch 1 feeds two sub-branches; it keeps a pipe of its own.
		r := &s.Branches[1]
		r.TerminalDrop, r.Valve, r.Setting, r.FittingsK, r.PipeLength = 0, "", nan, 4, 20
		r.PipeBore = 0.027
		for k := range 2 {
			b := s.Branches[0]
			b.ID, b.Parent = fmt.Sprintf("b01.%d", k), "b01"
			b.DesignFlow = (0.2 + 0.2*rng.Float64()) * 1e-3
			b.TerminalFlow = b.DesignFlow
			b.SupplyLength, b.ReturnLength, b.HeaderBore = 3, 3, 0.035
			s.Branches = append(s.Branches, b)
		}
		var q float64
		for _, b := range s.Branches[len(s.Branches)-2:] {
			q += b.DesignFlow
		}
		r.DesignFlow = q
	}
	if !sp.constDiff {
		setPump(tb, s)
	}
	if sp.pumps != "" {
		splitPump(s, sp.pumps == "series")
	}
	if sp.bypass {
		s.Branches[1].BypassValve, s.Branches[1].BypassSetting = testValve.Name, 2.5
	}
	return s
}

// splitPump replaces the site's one pump H(q) by two unequal pumps: in
// parallel P1 with head H(1.6 q) and P2 with 0.95 H(2.7 q) (their flows at
// equal head add to about the one pump's), in series P1 0.6 H(q) and P2
// 0.42 H(q).
func splitPump(s *site.Site, series bool) {
	one := s.Pump
	s.Pump, s.PumpSeries = nil, series
	for k, f := range [][2]float64{{1.6, 1}, {2.7, 0.95}} {
		if series {
			f = [][2]float64{{1, 0.6}, {1, 0.42}}[k]
		}
		for _, pt := range one {
			s.Pump = append(s.Pump, site.PumpPoint{Pump: fmt.Sprintf("P%d", k+1), Flow: pt.Flow / f[0], Head: f[1] * pt.Head, Speed: math.NaN(), Efficiency: math.NaN()})
		}
	}
}

// setPump gives the site a pump curve H = 1.3 Hd - 0.3 Hd (Q/Qd)² through
// the design duty (Qd, Hd), Hd being 1.25 times the largest branch drop at
// design flow (an allowance for the headers).
func setPump(tb testing.TB, s *site.Site) {
	tb.Helper()
	s.Pump = []site.PumpPoint{{Flow: 0, Head: 10}, {Flow: 1e-3, Head: 9}, {Flow: 2e-3, Head: 6}}
	m, err := plant.New(s)
	if err != nil {
		tb.Fatal(err)
	}
	var qd, dmax float64
	for i, b := range m.Branches {
		if b.Parent == "" {
			qd += b.Design
		}
		var d float64
		for _, e := range m.Elements(i, m.Design(), m.AsFound()[i]) {
			dp, _ := e.Drop(b.Design, m.Fluid)
			d += dp
		}
		dmax = max(dmax, d)
	}
	hd := 1.25 * dmax / (m.Fluid.Density * hydraulics.StandardGravity)
	h := func(q float64) float64 { return 1.3*hd - 0.3*hd*(q/qd)*(q/qd) }
	s.Pump = []site.PumpPoint{{Flow: 0, Head: h(0)}, {Flow: qd, Head: h(qd)}, {Flow: 1.5 * qd, Head: h(1.5 * qd)}}
}

// read adds a reading whose value the simulation fills in.
func read(s *site.Site, state, where string, what site.Quantity, instrument string, setting float64) {
	s.Readings = append(s.Readings, site.Reading{State: state, Where: where, What: what, Instrument: instrument,
		Setting: setting, Sigma: math.NaN(), Value: math.NaN(), Pos: site.Pos{File: "readings.csv", Line: len(s.Readings) + 2}})
}

// truth is what the simulation takes to be the real plant.
type truth struct {
	p plant.Params
	// actual is the setting a mis-set valve really has in each state,
	// keyed by branch, whatever was recorded.
	actual map[int]float64
	// stuck is the setting whose Kv a seized valve holds, keyed by branch.
	stuck map[int]float64
}

func newTruth(m *plant.Model) *truth {
	return &truth{p: m.Design(), actual: map[int]float64{}, stuck: map[int]float64{}}
}

func instrument(name string) *site.Instrument {
	for _, in := range site.Instruments() {
		if in.Name == name {
			return &in
		}
	}
	return nil
}

// simulate fills every reading of m's site with the value the true plant
// gives, read by its instrument: plant.Solved.Predict, except a valve-meter
// flow, which is the flow the meter computes from the true valve
// differential with the table Kv at the recorded setting. Each reading's
// sigma is its instrument's default at the true value; with rng non-nil a
// normal error of that sigma is added, and sigmaScale multiplies the sigma
// stated (tiny for noise-free tests).
func simulate(tb testing.TB, m *plant.Model, tr *truth, rng *rand.Rand, sigmaScale float64) {
	tb.Helper()
	ctx := context.Background()
	s := m.Site
	for _, st := range m.States {
		p := tr.p.Clone()
		for i, b := range m.Branches {
			if b.Valve == nil {
				continue
			}
			rec, err := b.Valve.KvAt(st.Settings[i])
			if err != nil {
				tb.Fatal(err)
			}
			set, ok := tr.actual[i]
			if ss, stuck := tr.stuck[i]; stuck {
				set, ok = ss, true
			}
			if ok {
				kv, err := b.Valve.KvAt(set)
				if err != nil {
					tb.Fatal(err)
				}
				p.KvScale[i] *= kv / rec
			}
		}
		sol, err := m.Solve(ctx, p, st)
		if err != nil {
			tb.Fatal(err)
		}
		for _, ri := range st.Readings {
			r := &s.Readings[ri]
			v, err := sol.Predict(r)
			if err != nil {
				tb.Fatal(err)
			}
			if r.Instrument == "valve-meter" {
				i, _ := m.Index(r.Where)
				kv, _ := m.Branches[i].Valve.KvAt(st.Settings[i])
				c, _ := hydraulics.KvDrop(1, kv, m.Fluid.Density)
				dp := sol.ValveDiff(i)
				v = math.Copysign(math.Sqrt(math.Abs(dp)/c), dp)
			}
			in := instrument(r.Instrument)
			if in == nil {
				tb.Fatalf("no instrument %q", r.Instrument)
			}
			sigma := in.DefaultSigma(r.What, v)
			if rng != nil {
				v += sigma * rng.NormFloat64()
			}
			r.Value, r.Sigma = v, sigma*sigmaScale
		}
	}
}

// mustModel builds the model of s.
func mustModel(tb testing.TB, s *site.Site) *plant.Model {
	tb.Helper()
	m, err := plant.New(s)
	if err != nil {
		tb.Fatal(err)
	}
	return m
}

// flowSurvey adds, in one state, a clamp-on flow on every terminal branch,
// a manometer pump differential and a manometer branch differential on
// every other branch.
func flowSurvey(s *site.Site, state string) {
	nan := math.NaN()
	for i, b := range s.Branches {
		if b.Valve == "" && b.TerminalDrop == 0 {
			continue // a riser: its sub-branches are read
		}
		read(s, state, b.ID, site.Flow, "clamp-on", nan)
		if i%2 == 0 {
			read(s, state, b.ID, site.BranchDiff, "manometer", nan)
		}
	}
	if s.Boundary.Kind == site.PumpCurve {
		read(s, state, site.AtPump, site.PumpDiff, "manometer", nan)
	}
}
