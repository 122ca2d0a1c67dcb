package plant

import (
	"context"
	"math"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/site"
)

// pumpsSite is liftSite (a closed loop) whose one pump H0 - aQ² is given as
// n identical pumps, each with its curve's three points, in parallel or in
// series, with running of them running in the as-found state.
func pumpsSite(h0, a float64, n int, series bool, running int) *site.Site {
	s := liftSite(h0, a, 0, 0, 80e3, 0.012)
	one := s.Pump
	s.Pump = nil
	for k := range n {
		for _, pt := range one {
			pt.Pump, pt.Speed = string(rune('A'+k)), math.NaN()
			s.Pump = append(s.Pump, pt)
		}
	}
	s.PumpSeries = series
	s.PumpsRunning = running
	return s
}

// TestPumpsAgainstCombinedCurve: n identical pumps H0 - aQ² are one pump of
// the combined curve: in parallel H0 - a(Q/n)² (flows add at equal head), in
// series n(H0 - aQ²) (heads add at equal flow); the rules of pump handbooks
// (from memory), closed forms computed. Each combined curve is a quadratic,
// given to a one-pump site by three points on it: both sites must run at the
// same point, which on the square-law branch bQ² is also
// Q = sqrt(H0/(a/n² + b)) in parallel.
func TestPumpsAgainstCombinedCurve(t *testing.T) {
	const h0, a = 30.0, 40000.0
	for _, tc := range []struct {
		name             string
		n, running       int
		series           bool
		h0Comb, aComb, k float64 // the combined curve k(h0Comb - aComb Q²)
	}{
		{"two in parallel", 2, 0, false, h0, a / 4, 1},
		{"three in parallel", 3, 0, false, h0, a / 9, 1},
		{"three in parallel, two running", 3, 2, false, h0, a / 4, 1},
		{"duty and standby", 2, 1, false, h0, a, 1},
		{"two in series", 2, 0, true, h0, a, 2},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := New(pumpsSite(h0, a, tc.n, tc.series, tc.running))
			if err != nil {
				t.Fatal(err)
			}
			one, err := New(liftSite(tc.k*tc.h0Comb, tc.k*tc.aComb, 0, 0, 80e3, 0.012))
			if err != nil {
				t.Fatal(err)
			}
			ctx := context.Background()
			got, err := m.Solve(ctx, m.Design(), m.States[0])
			if err != nil {
				t.Fatal(err)
			}
			want, err := one.Solve(ctx, one.Design(), one.States[0])
			if err != nil {
				t.Fatal(err)
			}
			if relErr(got.TotalFlow(), want.TotalFlow()) > 1e-9 || relErr(got.PumpDiff(), want.PumpDiff()) > 1e-9 {
				t.Errorf("set runs at %.9g m3/s, %.6g Pa; one pump of the combined curve at %.9g m3/s, %.6g Pa",
					got.TotalFlow(), got.PumpDiff(), want.TotalFlow(), want.PumpDiff())
			}
			if !tc.series {
				rg := m.Fluid.Density * hydraulics.StandardGravity
				b := 80e3 / (rg * 0.012 * 0.012)
				n := float64(tc.n)
				if tc.running > 0 {
					n = float64(tc.running)
				}
				if q := math.Sqrt(h0 / (a/(n*n) + b)); relErr(got.TotalFlow(), q) > 1e-9 {
					t.Errorf("flow %.12g m3/s, closed form %.12g", got.TotalFlow(), q)
				}
			}
			// A speed reading predicted at the state's speed, and the
			// speed found back from the solved duty.
			if v := got.Model.Set(1, got.State.Running).SpeedFor(got.TotalFlow(), got.PumpDiff(), m.Fluid); relErr(v, 1) > 1e-6 {
				t.Errorf("speed for the solved duty = %.9g, want 1", v)
			}
		})
	}
}

// TestPumpsRunningPerState: duty/assist, one pump in one survey state and
// two in another (states sheet): each state runs at its own pumps' point.
func TestPumpsRunningPerState(t *testing.T) {
	s := pumpsSite(30, 40000, 2, false, 1)
	nan := math.NaN()
	s.Readings = append(s.Readings, site.Reading{State: "assist", Where: site.AtPump, What: site.PumpDiff, Value: 1, Setting: nan, Sigma: 1})
	s.States = []site.StateSetting{{Label: "assist", Speed: nan, SetPoint: nan, Running: 2}}
	m, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	if len(m.States) != 2 || m.States[0].Running != 1 || m.States[1].Running != 2 {
		t.Fatalf("states %+v: want as-found with 1 running, assist with 2", m.States)
	}
	ctx := context.Background()
	duty, err := m.Solve(ctx, m.Design(), m.States[0])
	if err != nil {
		t.Fatal(err)
	}
	both, err := m.Solve(ctx, m.Design(), m.States[1])
	if err != nil {
		t.Fatal(err)
	}
	// Two pumps on one square-law branch: more flow, but less than twice.
	if r := both.TotalFlow() / duty.TotalFlow(); !(r > 1.05 && r < 2) {
		t.Errorf("flow with two pumps / one pump = %.4f, want between 1 and 2", r)
	}
	ds := m.Duties(1, 2, 1, both.TotalFlow(), 0.7)
	if relErr(ds[0].Flow+ds[1].Flow, both.TotalFlow()) > 1e-12 || relErr(ds[0].Flow, ds[1].Flow) > 1e-12 {
		t.Errorf("duties %+v: want two equal halves of %g", ds, both.TotalFlow())
	}
}

func relErr(got, want float64) float64 {
	if want == 0 {
		return math.Abs(got)
	}
	return math.Abs(got-want) / math.Abs(want)
}

// TestPumpReadings: readings at one pump of several. Two identical pumps
// in parallel each give half the flow at the common differential; in
// series each gives half the differential at the whole flow (the
// combination rules, from memory); a pump standing by gives nothing.
func TestPumpReadings(t *testing.T) {
	ctx := context.Background()
	for _, tc := range []struct {
		name         string
		series       bool
		running      int
		flow, diff   float64 // of pump B, as fractions of the set's
		speedOfPumpB float64
	}{
		{"parallel", false, 2, 0.5, 1, 1},
		{"series", true, 2, 1, 0.5, 1},
		{"parallel, B standing by", false, 1, 0, 1, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := New(pumpsSite(30, 40000, 2, tc.series, tc.running))
			if err != nil {
				t.Fatal(err)
			}
			sol, err := m.Solve(ctx, m.Design(), m.States[0])
			if err != nil {
				t.Fatal(err)
			}
			for _, c := range []struct {
				what site.Quantity
				want float64
			}{
				{site.TotalFlow, tc.flow * sol.TotalFlow()},
				{site.PumpDiff, tc.diff * sol.PumpDiff()},
				{site.Speed, tc.speedOfPumpB},
			} {
				got, err := sol.Predict(&site.Reading{Where: "B", What: c.what})
				if err != nil {
					t.Fatal(err)
				}
				if relErr(got, c.want) > 1e-9 {
					t.Errorf("%v at pump B = %.9g, want %.9g", c.what, got, c.want)
				}
			}
		})
	}
}
