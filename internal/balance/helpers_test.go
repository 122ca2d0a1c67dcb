package balance

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

var nan = math.NaN()

// Invented valve tables for the tests (monotone, handwheel-like).
func testValves() []site.ValveModel {
	return []site.ValveModel{
		{Name: "V20", Unit: "turns", Settings: []float64{0, 1, 2, 3, 4}, Kv: []float64{0.1, 0.5, 1.4, 2.8, 4.2}, Step: 0.1, MinDiff: 3e3},
		{Name: "V32", Unit: "turns", Settings: []float64{0, 2, 4, 6, 8}, Kv: []float64{0.4, 2, 5, 9, 13}, Step: 0.1, MinDiff: 3e3},
		{Name: "EQ", Unit: "%", Characteristic: "equal-percentage", Kvs: 6, Rangeability: 50, Step: 1, MinDiff: 3e3},
	}
}

// genOpts shapes a random plant.
type genOpts struct {
	n       int
	header  site.Arrangement
	risers  bool
	pump    bool
	noValve bool // allow a riser without a valve
}

// randomSite returns a random plant of about o.n terminal branches: pipes,
// fittings and terminals invented within ordinary ranges, headers sized for
// about 1 m/s, some top branches made risers with their own ladders.
func randomSite(rng *rand.Rand, o genOpts) *site.Site {
	s := &site.Site{
		Name: "random", Fluid: "water", Temperature: 273.15 + 40, Header: o.header,
		Boundary:     site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 50e3, Sensor: site.AtPump},
		Valves:       testValves(),
		ToleranceLow: -0.1, ToleranceHigh: 0.1, Hours: 4000, EnergyPrice: 0.2, Currency: "EUR",
		PumpEfficiency: 0.6, MotorEfficiency: 0.9,
	}
	leaf := func(id, parent string) site.Branch {
		q := (0.08 + 0.5*rng.Float64()) * 1e-3
		v := []string{"V20", "V32", "EQ"}[rng.IntN(3)]
		return site.Branch{
			ID: id, Parent: parent, DesignFlow: q,
			PipeBore: 0.02 + 0.007*rng.Float64(), PipeLength: 4 + 16*rng.Float64(), Roughness: hydraulics.RoughnessSteel,
			FittingsK: 2 + 6*rng.Float64(), TerminalDrop: (8 + 25*rng.Float64()) * 1e3, TerminalFlow: nan,
			Valve: v, Setting: nan, HeaderBore: nan,
			SupplyLength: 1 + 8*rng.Float64(), ReturnLength: 1 + 8*rng.Float64(),
		}
	}
	var top, subs []site.Branch
	for k, leaves := 0, 0; leaves < o.n; k++ {
		id := fmt.Sprintf("B%d", k)
		if o.risers && rng.Float64() < 0.3 && o.n-leaves >= 3 {
			nc := 2 + rng.IntN(min(4, o.n-leaves-1))
			r := site.Branch{ID: id, DesignFlow: 0, PipeBore: nan, PipeLength: 6 + 10*rng.Float64(), Roughness: hydraulics.RoughnessSteel,
				FittingsK: 3, TerminalFlow: nan, Setting: nan, HeaderBore: nan, Valve: "V32",
				SupplyLength: 1 + 8*rng.Float64(), ReturnLength: 1 + 8*rng.Float64()}
			if o.noValve && rng.Float64() < 0.5 {
				r.Valve = ""
			}
			var kids []site.Branch
			var qr float64
			for c := range nc {
				b := leaf(fmt.Sprintf("%s.%d", id, c), id)
				qr += b.DesignFlow
				kids = append(kids, b)
			}
			r.DesignFlow = qr
			r.PipeBore = math.Sqrt(4 * qr / math.Pi)
			sizeHeaders(kids)
			top = append(top, r)
			subs = append(subs, kids...)
			leaves += nc
			continue
		}
		top = append(top, leaf(id, ""))
		leaves++
	}
	sizeHeaders(top)
	s.Branches = append(top, subs...)
	return s
}

// sizeHeaders sets each header segment's bore for about 1 m/s at the
// larger of the flows its supply and return segments may carry: the branches
// beyond it (supply; return in direct return) or before it (return in
// reverse return). The site gives one bore for both segments at a position.
func sizeHeaders(bs []site.Branch) {
	var total float64
	for _, b := range bs {
		total += b.DesignFlow
	}
	var beyond float64
	for k := len(bs) - 1; k >= 0; k-- {
		beyond += bs[k].DesignFlow
		q := max(beyond, total-beyond+bs[k].DesignFlow)
		if k == 0 {
			q = total
		}
		bs[k].HeaderBore = math.Sqrt(4 * q / math.Pi)
	}
}

// withPump turns a site's boundary into a pump whose curve gives 1.2 times
// the least differential the design plan needs at the design flow, and
// returns the model.
func withPump(tb testing.TB, s *site.Site) *plant.Model {
	tb.Helper()
	m := mustModel(tb, s)
	q := make([]float64, len(m.Branches))
	for i, b := range m.Branches {
		q[i] = b.Target
	}
	ex, err := newExact(m, m.Design(), q)
	if err != nil {
		tb.Fatal(err)
	}
	h := ex.least / (m.Fluid.Density * hydraulics.StandardGravity)
	Q := ex.total()
	s.Boundary = site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1.1, SetPoint: nan, Sensor: site.AtPump}
	s.Pump = []site.PumpPoint{{Flow: 0, Head: 1.5 * h}, {Flow: Q, Head: 1.2 * h}, {Flow: 1.6 * Q, Head: 0.6 * h}}
	return mustModel(tb, s)
}

func mustModel(tb testing.TB, s *site.Site) *plant.Model {
	tb.Helper()
	m, err := plant.New(s)
	if err != nil {
		tb.Fatal(err)
	}
	return m
}

// randomParams returns multipliers scattered about design.
func randomParams(rng *rand.Rand, m *plant.Model) plant.Params {
	p := m.Design()
	for i := range p.Resistance {
		p.Resistance[i] = math.Exp(0.3 * rng.NormFloat64())
		p.KvScale[i] = math.Exp(0.05 * rng.NormFloat64())
	}
	p.Header = math.Exp(0.2 * rng.NormFloat64())
	p.PumpHead = math.Exp(0.05 * rng.NormFloat64())
	return p
}

func mustCompute(tb testing.TB, m *plant.Model, p plant.Params, opt *Options) *Plan {
	tb.Helper()
	pl, err := Compute(context.Background(), m, p, opt)
	if err != nil {
		tb.Fatal(err)
	}
	return pl
}
