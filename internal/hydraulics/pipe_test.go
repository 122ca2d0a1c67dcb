package hydraulics

import (
	"errors"
	"fmt"
	"math"
	"testing"

	"flowset/internal/fluid"
)

func TestPipeHagenPoiseuille(t *testing.T) {
	// Closed form for laminar flow: dp = 128 μ L q / (π D⁴).
	p := Pipe{Bore: 0.01, Length: 3, Roughness: 1.5e-6}
	for _, q := range []float64{0, 1e-7, 1e-6, -1e-6} {
		dp, slope := p.Drop(q, water20)
		want := 128 * water20.Viscosity * p.Length / (math.Pi * math.Pow(p.Bore, 4))
		if relErr(slope, want) > 1e-14 || relErr(dp, want*q) > 1e-14 {
			t.Errorf("Drop(%g) = %g, %g; want %g, %g", q, dp, slope, want*q, want)
		}
	}
}

func TestPipeDarcyWeisbach(t *testing.T) {
	// dp = f L/D ρ v²/2 with f from the Colebrook table (references §2.2,
	// [C]): choose q so that Re = 1e5 exactly in a DN50 pipe, ε/D = 1e-3.
	p := Pipe{Bore: 0.05, Length: 10, Roughness: 0.05e-3}
	v := 1e5 * water20.Viscosity / (water20.Density * p.Bore)
	q := v * p.Area()
	if re := p.Reynolds(q, water20); relErr(re, 1e5) > 1e-14 {
		t.Fatalf("Reynolds = %g, want 1e5", re)
	}
	dp, _ := p.Drop(q, water20)
	want := 0.022174535944515076 * p.Length / p.Bore * water20.Density * v * v / 2
	if relErr(dp, want) > 1e-12 {
		t.Errorf("Drop = %.12g, want %.12g", dp, want)
	}
	if got := p.Velocity(-q); got != -v && relErr(got, -v) > 1e-15 {
		t.Errorf("Velocity(-q) = %g, want %g", got, -v)
	}
}

// elementCases are one of each passive element, for the derivative and
// oddness checks.
func elementCases() []struct {
	name string
	e    Element
} {
	pipe := Pipe{Bore: 0.0266, Length: 25, Roughness: 0.045e-3}
	return []struct {
		name string
		e    Element
	}{
		{"pipe", pipe},
		{"smooth pipe", Pipe{Bore: 0.02, Length: 5}},
		{"fitting", Fitting{K: 1.5, Bore: 0.0266}},
		{"terminal", Terminal{RatedDrop: 15e3, RatedFlow: 0.3e-3}},
		{"fixed kv", FixedKv{Kv: 2.5}},
		{"scaled", Scaled{E: pipe, Factor: 1.7}},
		{"series", Series{pipe, Fitting{K: 3, Bore: 0.0266}, FixedKv{Kv: 4}}},
		{"valve table", Valve{Char: handwheel(), Setting: 2.7, KvScale: 1.1}},
		{"valve equal-percentage", Valve{Char: Inherent{Kind: EqualPercentage, Kvs: 2.5, Rangeability: 50}, Setting: 0.4}},
		{"valve closed", Valve{Char: Table{Settings: []float64{0, 1}, Kv: []float64{1e-8, 3}}}},
	}
}

// testFlows covers laminar, transition and turbulent flow in a DN25 pipe of
// water (Re 2000 ≈ 4.2e-5 m3/s), and reversed flow.
var testFlows = []float64{1e-6, 2e-5, 5e-5, 6e-5, 7.5e-5, 9e-5, 1e-4, 1e-3, 5e-3}

func TestElementSlopes(t *testing.T) {
	for _, ec := range elementCases() {
		t.Run(ec.name, func(t *testing.T) {
			for _, q := range testFlows {
				checkSlope(t, ec.name, ec.e, q, 1e-4, water20, 1e-6)
				checkSlope(t, ec.name, ec.e, -q, 1e-4, water20, 1e-6)
				checkOdd(t, ec.name, ec.e, q, water20)
			}
			dp, slope := ec.e.Drop(0, water20)
			if dp != 0 || slope < 0 || math.IsInf(slope, 0) || math.IsNaN(slope) {
				t.Errorf("Drop(0) = %g, %g; want 0 and a finite non-negative slope", dp, slope)
			}
		})
	}
}

func TestElementMonotone(t *testing.T) {
	// A passive element's drop strictly increases with flow over the
	// laminar-transition-turbulent sweep, so the network equations have one
	// solution.
	for _, ec := range elementCases() {
		prev := math.Inf(-1)
		for q := 1e-7; q < 1e-2; q *= 1.05 {
			dp, slope := ec.e.Drop(q, water20)
			if !(dp > prev) || !(slope > 0) {
				t.Errorf("%s: Drop(%g) = %g, %g after %g: want increasing", ec.name, q, dp, slope, prev)
				break
			}
			prev = dp
		}
	}
}

func TestFittingAndTerminal(t *testing.T) {
	// Fitting: dp = K ρ v²/2 (definition of the loss coefficient).
	ft := Fitting{K: 2, Bore: 0.1}
	q := 0.01
	v := q / (math.Pi / 4 * 0.01)
	if dp, _ := ft.Drop(q, water20); relErr(dp, 2*water20.Density*v*v/2) > 1e-14 {
		t.Errorf("Fitting.Drop = %g, want %g", dp, water20.Density*v*v)
	}
	// Terminal: passes through its rated point and scales with q².
	tm := Terminal{RatedDrop: 20e3, RatedFlow: 0.5e-3}
	if dp, _ := tm.Drop(0.5e-3, water20); relErr(dp, 20e3) > 1e-15 {
		t.Errorf("Terminal.Drop(rated) = %g, want 20000", dp)
	}
	if dp, _ := tm.Drop(0.25e-3, water20); relErr(dp, 5e3) > 1e-15 {
		t.Errorf("Terminal.Drop(rated/2) = %g, want 5000", dp)
	}
}

func TestValidate(t *testing.T) {
	tests := []struct {
		name string
		v    interface{ Validate() error }
		ok   bool
	}{
		{"pipe ok", Pipe{Bore: 0.02, Length: 1, Roughness: 1e-5}, true},
		{"pipe zero bore", Pipe{Length: 1}, false},
		{"pipe negative length", Pipe{Bore: 0.02, Length: -1}, false},
		{"pipe too rough", Pipe{Bore: 0.02, Length: 1, Roughness: 0.005}, false},
		{"pipe NaN", Pipe{Bore: math.NaN(), Length: 1}, false},
		{"fitting ok", Fitting{K: 0.3, Bore: 0.02}, true},
		{"fitting negative K", Fitting{K: -1, Bore: 0.02}, false},
		{"fitting zero bore", Fitting{K: 1}, false},
		{"terminal ok", Terminal{RatedDrop: 1e4, RatedFlow: 1e-4}, true},
		{"terminal zero flow", Terminal{RatedDrop: 1e4}, false},
		{"terminal zero drop", Terminal{RatedFlow: 1e-4}, false},
		{"fixed kv ok", FixedKv{Kv: 1}, true},
		{"fixed kv zero", FixedKv{}, false},
		{"scaled ok", Scaled{E: Pipe{Bore: 0.02, Length: 1}, Factor: 1.2}, true},
		{"scaled nil", Scaled{Factor: 1}, false},
		{"scaled negative", Scaled{E: FixedKv{Kv: 1}, Factor: -1}, false},
		{"scaled bad inner", Scaled{E: FixedKv{}, Factor: 1}, false},
		{"series ok", Series{FixedKv{Kv: 1}, Terminal{RatedDrop: 1, RatedFlow: 1}}, true},
		{"series bad element", Series{FixedKv{Kv: 1}, Terminal{}}, false},
		{"series nil element", Series{nil}, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			err := tc.v.Validate()
			if tc.ok && err != nil {
				t.Errorf("Validate() = %v, want nil", err)
			}
			if !tc.ok && !errors.Is(err, ErrInvalid) {
				t.Errorf("Validate() = %v, want ErrInvalid", err)
			}
		})
	}
}

func BenchmarkPipeDrop(b *testing.B) {
	p := Pipe{Bore: 0.0266, Length: 25, Roughness: 0.045e-3}
	for _, c := range []struct {
		name string
		q    float64
	}{{"laminar", 2e-5}, {"transition", 7e-5}, {"turbulent", 1e-3}} {
		b.Run(c.name, func(b *testing.B) {
			var s float64
			for b.Loop() {
				dp, _ := p.Drop(c.q, water20)
				s += dp
			}
			_ = s
		})
	}
}

func ExamplePipe_Drop() {
	// 25 m of DN25 steel pipe (bore 26.6 mm) carrying 0.5 L/s of water at
	// 20 °C.
	p := Pipe{Bore: 0.0266, Length: 25, Roughness: 0.045e-3}
	water := fluid.State{Temperature: 293.15, Density: 998.2061, Viscosity: 1.0016e-3}
	dp, _ := p.Drop(0.5e-3, water)
	fmt.Printf("v = %.3f m/s, Re = %.0f, dp = %.2f kPa\n", p.Velocity(0.5e-3), p.Reynolds(0.5e-3, water), dp/1e3)
	// Output:
	// v = 0.900 m/s, Re = 23852, dp = 10.79 kPa
}
