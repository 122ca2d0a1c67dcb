package network

import (
	"context"
	"errors"
	"math"
	"slices"
	"strings"
	"testing"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
)

// TestSingleLink: a network of one link between two fixed pressures carries
// the flow at which the element's drop equals the differential.
func TestSingleLink(t *testing.T) {
	pipe := hydraulics.Pipe{Bore: 0.02664, Length: 30, Roughness: 4.5e-5} // DN25 Sch 40 bore, references §4.1
	cases := []struct {
		name  string
		dp    float64
		elems []Element
		want  float64 // closed form flow, NaN: check against the element itself
	}{
		// dp = r q² -> q = sqrt(dp/r).
		{"square law", 1e4, []Element{quad{1e10}}, 1e-3},
		// dp = r q -> q = dp/r (Hagen-Poiseuille-type).
		{"linear", 2e3, []Element{lin{4e6}}, 5e-4},
		{"real pipe", 5e3, []Element{pipe}, math.NaN()},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			n := New(water20)
			a, b := n.AddNode("a"), n.AddNode("b")
			n.FixPressure(a, 3e5+c.dp)
			n.FixPressure(b, 3e5)
			l := n.AddLink("l", a, b, c.elems...)
			sol := mustSolve(t, n, nil)
			q := sol.Flow[l]
			if math.IsNaN(c.want) {
				var h float64
				for _, e := range c.elems {
					d, _ := e.Drop(q, water20)
					h += d
				}
				if relErr(h, c.dp) > 1e-9 {
					t.Errorf("element drop at solved flow %g = %g Pa, want %g", q, h, c.dp)
				}
				return
			}
			if relErr(q, c.want) > 1e-9 {
				t.Errorf("flow = %.12g, want %.12g", q, c.want)
			}
			if relErr(sol.Drop[l], c.dp) > 1e-9 {
				t.Errorf("drop = %g, want %g", sol.Drop[l], c.dp)
			}
		})
	}
}

// Element is a local alias to keep the tables short.
type Element = hydraulics.Element

// TestSeries: elements in series carry one flow and their drops add
// (textbook series rule), whether in one link or in a chain of links.
func TestSeries(t *testing.T) {
	const dp, r1, r2, r3 = 3e4, 1e10, 2e10, 3e9
	// (r1 + r2) q² + r3 q = dp -> q = (-r3 + sqrt(r3² + 4 (r1+r2) dp)) / (2 (r1+r2)).
	rs := r1 + r2
	want := (-r3 + math.Sqrt(r3*r3+4*rs*dp)) / (2 * rs)
	t.Run("one link", func(t *testing.T) {
		n := New(water20)
		a, b := n.AddNode("a"), n.AddNode("b")
		n.FixPressure(a, dp)
		n.FixPressure(b, 0)
		l := n.AddLink("l", a, b, quad{r1}, quad{r2}, lin{r3})
		if q := mustSolve(t, n, nil).Flow[l]; relErr(q, want) > 1e-9 {
			t.Errorf("flow = %.12g, want %.12g", q, want)
		}
	})
	t.Run("chain of links", func(t *testing.T) {
		n := New(water20)
		a, b, c, d := n.AddNode("a"), n.AddNode("b"), n.AddNode("c"), n.AddNode("d")
		n.FixPressure(a, dp)
		n.FixPressure(d, 0)
		n.AddLink("1", a, b, quad{r1})
		n.AddLink("2", c, b, quad{r2}) // declared against the flow
		n.AddLink("3", c, d, lin{r3})
		sol := mustSolve(t, n, nil)
		for i, sign := range []float64{1, -1, 1} {
			if relErr(sign*sol.Flow[i], want) > 1e-9 {
				t.Errorf("link %d flow = %.12g, want %.12g", i, sol.Flow[i], sign*want)
			}
		}
		// Pressure at b: dp - r1 q².
		if relErr(sol.Pressure[b], dp-r1*want*want) > 1e-9 {
			t.Errorf("pressure at b = %g, want %g", sol.Pressure[b], dp-r1*want*want)
		}
	})
}

// TestParallelClosedForm checks parallel square-law resistances r_i under a
// common differential against the textbook closed form: every branch has
// dp = r_i q_i², so q_i = sqrt(dp/r_i) and Q = Σ q_i = sqrt(dp) Σ 1/sqrt(r_j),
// hence
//
//	dp = Q² / (Σ 1/sqrt(r_j))²,   q_i = Q / (sqrt(r_i) Σ 1/sqrt(r_j)).
//
// The total flow is imposed as a demand at the downstream node.
func TestParallelClosedForm(t *testing.T) {
	cases := []struct {
		name string
		r    []float64
		Q    float64
	}{
		// references §8.1 [C] Hardy Cross check: r1 = 1, r2 = 4, Q = 6 -> q1 = 4,
		// q2 = 2, dp = 16 (dimensionless units).
		{"hardy cross check", []float64{1, 4}, 6},
		{"two branches", []float64{2e10, 5e9}, 2e-3},
		{"three branches", []float64{1e10, 4e10, 9e10}, 3e-3},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			n := New(water20)
			a, b := n.AddNode("a"), n.AddNode("b")
			n.FixPressure(a, 2e5)
			n.SetDemand(b, c.Q)
			var sum float64
			for i, r := range c.r {
				n.AddLink(string(rune('1'+i)), a, b, quad{r})
				sum += 1 / math.Sqrt(r)
			}
			sol := mustSolve(t, n, nil)
			wantDp := c.Q * c.Q / (sum * sum)
			if got := sol.Pressure[a] - sol.Pressure[b]; relErr(got, wantDp) > 1e-9 {
				t.Errorf("differential = %.12g, want %.12g", got, wantDp)
			}
			for i, r := range c.r {
				want := c.Q / (math.Sqrt(r) * sum)
				if relErr(sol.Flow[i], want) > 1e-9 {
					t.Errorf("q%d = %.12g, want %.12g", i+1, sol.Flow[i], want)
				}
			}
			checkBalance(t, n, sol, 1e-9)
		})
	}
	// The same check in the references' own numbers.
	n := New(water20)
	a, b := n.AddNode("a"), n.AddNode("b")
	n.FixPressure(a, 0)
	n.SetDemand(b, 6)
	n.AddLink("1", a, b, quad{1})
	n.AddLink("2", a, b, quad{4})
	sol := mustSolve(t, n, nil)
	for i, want := range []float64{4, 2} { // references §8.1: q1 = 4, q2 = 2
		if math.Abs(sol.Flow[i]-want) > 1e-9 {
			t.Errorf("hardy cross check: q%d = %.12g, want %g", i+1, sol.Flow[i], want)
		}
	}
	if got := -sol.Pressure[b]; math.Abs(got-16) > 1e-8 { // references §8.1: dp = 16
		t.Errorf("hardy cross check: dp = %.12g, want 16", got)
	}
}

// TestPumpLoop: a closed loop of a pump with gain h0 - a q² and a resistance
// r q² runs at h0 - a q² = r q², q = sqrt(h0/(a+r)) (intersection of pump and
// system curves, textbook).
func TestPumpLoop(t *testing.T) {
	const h0, a, r = 5e4, 1e9, 4e9
	n := New(water20)
	s, ret := n.AddNode("s"), n.AddNode("r")
	n.FixPressure(ret, 1.5e5)
	p := n.AddLink("pump", ret, s, pumpQuad{h0, a})
	l := n.AddLink("load", s, ret, quad{r})
	sol := mustSolve(t, n, nil)
	want := math.Sqrt(h0 / (a + r))
	for _, i := range []int{p, l} {
		if relErr(sol.Flow[i], want) > 1e-9 {
			t.Errorf("flow in %s = %.12g, want %.12g", n.LinkID(i), sol.Flow[i], want)
		}
	}
	if got, wantP := sol.Pressure[s], 1.5e5+r*want*want; relErr(got, wantP) > 1e-9 {
		t.Errorf("discharge pressure = %.12g, want %.12g", got, wantP)
	}
}

// TestPumpAgainstBackPressure: a pump whose shut-off gain h0 is below the
// differential B it must push against is driven backwards; with the gain law
// h0 - a q|q| continued to negative flow and a resistance r q|q| in series,
// -h0 + (a + r) q|q| = -B gives q = -sqrt((B - h0)/(a + r)).
func TestPumpAgainstBackPressure(t *testing.T) {
	const h0, a, r, back = 3e4, 1e9, 4e9, 5e4
	n := New(water20)
	in, mid, out := n.AddNode("in"), n.AddNode("mid"), n.AddNode("out")
	n.FixPressure(in, 1e5)
	n.FixPressure(out, 1e5+back)
	p := n.AddLink("pump", in, mid, pumpQuad{h0, a})
	n.AddLink("pipe", mid, out, quad{r})
	sol := mustSolve(t, n, nil)
	want := -math.Sqrt((back - h0) / (a + r))
	if relErr(sol.Flow[p], want) > 1e-9 {
		t.Errorf("pump flow = %.12g, want %.12g (reversed)", sol.Flow[p], want)
	}
}

// TestZeroFlowBridge: in a balanced Wheatstone bridge (r1/r3 = r2/r4) the
// two bridge ends are at equal pressure, so the bridge link carries no flow
// whatever its resistance (textbook bridge balance condition); the square-law
// bridge has zero slope there and relies on the slope floor.
func TestZeroFlowBridge(t *testing.T) {
	n := New(water20)
	s, r, a, b := n.AddNode("s"), n.AddNode("r"), n.AddNode("a"), n.AddNode("b")
	n.FixPressure(s, 4e4)
	n.FixPressure(r, 0)
	n.AddLink("1", s, a, quad{1e10})
	n.AddLink("2", s, b, quad{3e10})
	n.AddLink("3", a, r, quad{2e10})
	n.AddLink("4", b, r, quad{6e10})
	br := n.AddLink("bridge", a, b, quad{5e9})
	sol := mustSolve(t, n, nil)
	// Without the bridge: q_left = sqrt(4e4 / 3e10), q_right = sqrt(4e4 / 9e10).
	ql := math.Sqrt(4e4 / 3e10)
	if math.Abs(sol.Flow[br]) > 1e-9*ql {
		t.Errorf("bridge flow = %g, want 0", sol.Flow[br])
	}
	if relErr(sol.Flow[0], ql) > 1e-9 {
		t.Errorf("left flow = %.12g, want %.12g", sol.Flow[0], ql)
	}
	checkBalance(t, n, sol, 1e-9)
}

// TestClosedValve: a branch closed down to a leakage resistance (linear,
// 1e16 Pa s/m3) beside an open square-law branch passes the leakage flow
// dp/R while the open branch is unaffected.
func TestClosedValve(t *testing.T) {
	const dp = 2e4
	n := New(water20)
	s, r := n.AddNode("s"), n.AddNode("r")
	n.FixPressure(s, dp)
	n.FixPressure(r, 0)
	m := n.AddNode("m")
	n.AddLink("main", s, m, quad{1e9})
	open := n.AddLink("open", m, r, quad{1e10})
	shut := n.AddLink("shut", m, r, lin{1e16})
	sol := mustSolve(t, n, nil)
	// Open path: (1e9 + 1e10) q² = dp, neglecting the leakage (relative 1e-9).
	q := math.Sqrt(dp / 1.1e10)
	if relErr(sol.Flow[open], q) > 1e-8 {
		t.Errorf("open branch flow = %.12g, want %.12g", sol.Flow[open], q)
	}
	wantLeak := 1e10 * q * q / 1e16
	if relErr(sol.Flow[shut], wantLeak) > 1e-6 {
		t.Errorf("closed branch flow = %g, want %g", sol.Flow[shut], wantLeak)
	}
}

func TestTopologyErrors(t *testing.T) {
	cases := []struct {
		name  string
		build func(n *Network)
		want  error
		text  string
	}{
		{"no fixed node", func(n *Network) {
			a, b := n.AddNode("a"), n.AddNode("b")
			n.AddLink("l", a, b, quad{1})
		}, ErrTopology, "no node has a fixed pressure"},
		{"disconnected node", func(n *Network) {
			a, b := n.AddNode("a"), n.AddNode("b")
			n.AddNode("island")
			n.FixPressure(a, 0)
			n.AddLink("l", a, b, quad{1})
		}, ErrTopology, `node "island" is not connected`},
		{"disconnected part", func(n *Network) {
			a, b, c, d := n.AddNode("a"), n.AddNode("b"), n.AddNode("c"), n.AddNode("d")
			n.FixPressure(a, 0)
			n.AddLink("l", a, b, quad{1})
			n.AddLink("m", c, d, quad{1})
		}, ErrTopology, `node "c" is not connected`},
		{"self link", func(n *Network) {
			a := n.AddNode("a")
			n.FixPressure(a, 0)
			n.AddLink("loop", a, a, quad{1})
		}, ErrTopology, `link "loop" runs from node "a" to itself`},
		{"bad index", func(n *Network) {
			a := n.AddNode("a")
			n.FixPressure(a, 0)
			n.AddLink("l", a, 7, quad{1})
		}, ErrTopology, `link "l": node index out of range`},
		{"duplicate node", func(n *Network) {
			a := n.AddNode("a")
			b := n.AddNode("a")
			n.FixPressure(a, 0)
			n.AddLink("l", a, b, quad{1})
		}, ErrTopology, `duplicate node id "a"`},
		{"nil element", func(n *Network) {
			a, b := n.AddNode("a"), n.AddNode("b")
			n.FixPressure(a, 0)
			n.AddLink("l", a, b, nil)
		}, ErrInput, `link "l": element 0 is nil`},
		{"nan element", func(n *Network) {
			a, b := n.AddNode("a"), n.AddNode("b")
			n.FixPressure(a, 0)
			n.FixPressure(b, 1)
			n.AddLink("bad", a, b, nanElem{})
		}, ErrElement, `link "bad"`},
		{"infinite pressure", func(n *Network) {
			a, b := n.AddNode("a"), n.AddNode("b")
			n.FixPressure(a, math.Inf(1))
			n.AddLink("l", a, b, quad{1})
		}, ErrElement, `node "a": fixed pressure`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			n := New(water20)
			c.build(n)
			_, err := n.Solve(context.Background(), nil)
			if !errors.Is(err, c.want) {
				t.Fatalf("Solve error = %v, want %v", err, c.want)
			}
			if !strings.Contains(err.Error(), c.text) {
				t.Errorf("Solve error = %q, want it to contain %q", err, c.text)
			}
		})
	}
}

func TestConvergenceError(t *testing.T) {
	t.Run("iterations exhausted", func(t *testing.T) {
		_, err := sensitivityNet().Solve(context.Background(), &Options{MaxIter: 2})
		var ce *ConvergenceError
		if !errors.As(err, &ce) || !errors.Is(err, ErrNoConvergence) {
			t.Fatalf("Solve error = %v, want *ConvergenceError", err)
		}
		if ce.Iterations != 2 || ce.WorstLink == "" || !(ce.Residual > DefaultTol) {
			t.Errorf("ConvergenceError = %+v, want 2 iterations, a worst link and a residual above tolerance", ce)
		}
	})
	t.Run("cancelled before", func(t *testing.T) {
		ctx, cancel := context.WithCancel(context.Background())
		cancel()
		if _, err := sensitivityNet().Solve(ctx, nil); !errors.Is(err, context.Canceled) {
			t.Fatalf("Solve error = %v, want context.Canceled", err)
		}
	})
	t.Run("cancelled between iterations", func(t *testing.T) {
		ctx, cancel := context.WithCancel(context.Background())
		defer cancel()
		n := sensitivityNet()
		// The element cancels the context during the third pass over the links.
		calls := 0
		n.SetElements(1, append(slices.Clone(n.Elements(1)), hook(func() {
			if calls++; calls == 3 {
				cancel()
			}
		}))...)
		_, err := n.Solve(ctx, nil)
		var ce *ConvergenceError
		if !errors.Is(err, context.Canceled) || !errors.As(err, &ce) {
			t.Fatalf("Solve error = %v, want context.Canceled in a *ConvergenceError", err)
		}
		if calls > 4 {
			t.Errorf("%d passes over the links after cancelling, want at most one more", calls-3)
		}
	})
	t.Run("bad options", func(t *testing.T) {
		_, err := sensitivityNet().Solve(context.Background(), &Options{Initial: []float64{1}})
		if !errors.Is(err, ErrInput) {
			t.Fatalf("Solve error = %v, want ErrInput", err)
		}
	})
}

// hook is an element with no drop that calls f on every evaluation.
type hook func()

func (h hook) Drop(float64, fluid.State) (float64, float64) { h(); return 0, 0 }

// TestWarmStart: starting from the previous solution after a small change
// converges in fewer steps to the same answer as a cold start.
func TestWarmStart(t *testing.T) {
	n := New(water20)
	s, m, r := n.AddNode("s"), n.AddNode("m"), n.AddNode("r")
	n.FixPressure(r, 0)
	pump := n.AddLink("pump", r, s, pumpQuad{6e4, 2e9})
	n.AddLink("a", s, m, quad{1e10})
	n.AddLink("b", s, m, quad{2e10})
	load := n.AddLink("c", m, r, quad{5e9})
	cold := mustSolve(t, n, nil)
	n.SetElements(load, quad{5.1e9})
	warm := mustSolve(t, n, &Options{Initial: cold.Flow})
	again := mustSolve(t, n, nil)
	if warm.Iterations >= again.Iterations {
		t.Errorf("warm start took %d iterations, cold start %d", warm.Iterations, again.Iterations)
	}
	if relErr(warm.Flow[pump], again.Flow[pump]) > 1e-9 {
		t.Errorf("warm pump flow %.12g, cold %.12g", warm.Flow[pump], again.Flow[pump])
	}
}

// TestRealPumpAgainstBackPressure: a hydraulics.Pump whose shut-off head is
// below the back-pressure it faces runs backwards (its element extrapolates
// the curve to reverse flow); the answer must be a consistent reversed flow:
// pump and pipe drops at the solved flow add up to the imposed difference.
func TestRealPumpAgainstBackPressure(t *testing.T) {
	// H = 8 - 2000 q² m (shut-off 8 m, about 78 kPa), against 100 kPa.
	pump := hydraulics.Pump{Curve: hydraulics.PumpCurve{A0: 8, A2: -2000, QMax: 0.06}}
	pipe := hydraulics.Pipe{Bore: 0.05248, Length: 20, Roughness: 4.5e-5}
	n := New(water20)
	in, mid, out := n.AddNode("in"), n.AddNode("mid"), n.AddNode("out")
	n.FixPressure(in, 1e5)
	n.FixPressure(out, 2e5)
	p := n.AddLink("pump", in, mid, pump)
	l := n.AddLink("pipe", mid, out, pipe)
	sol := mustSolve(t, n, nil)
	q := sol.Flow[p]
	if !(q < 0) {
		t.Fatalf("pump flow = %g, want reversed (negative)", q)
	}
	dp1, _ := pump.Drop(q, water20)
	dp2, _ := pipe.Drop(sol.Flow[l], water20)
	if relErr(dp1+dp2, -1e5) > 1e-9 {
		t.Errorf("pump + pipe drop = %g Pa at flow %g, want -1e5", dp1+dp2, q)
	}
}

// TestPumpSetLoop: n identical pumps H0 - aQ² (a hydraulics.PumpSet) in a
// loop with a resistance bQ² run where H0 - a(Q/n)² = bQ² (parallel:
// flows add at equal head) or n(H0 - aQ²) = bQ² (series: heads add at
// equal flow), so Q = sqrt(H0/(a/n² + b)) or sqrt(nH0/(na + b)) (the
// combination rules of pump handbooks, from memory; closed forms computed).
// The network solver meets the set's kinks and slope limits as it would
// on a site.
func TestPumpSetLoop(t *testing.T) {
	const h0, a, b = 30.0, 2.4e4, 1.2e4 // m, m/(m3/s)²
	c := hydraulics.PumpCurve{A0: h0, A2: -a, QMax: math.Sqrt(h0 / a)}
	rg := water20.Density * hydraulics.StandardGravity
	for _, tc := range []struct {
		name   string
		n      int
		series bool
		want   float64
	}{
		{"one", 1, false, math.Sqrt(h0 / (a + b))},
		{"two in parallel", 2, false, math.Sqrt(h0 / (a/4 + b))},
		{"three in parallel", 3, false, math.Sqrt(h0 / (a/9 + b))},
		{"two in series", 2, true, math.Sqrt(2 * h0 / (2*a + b))},
	} {
		t.Run(tc.name, func(t *testing.T) {
			set := hydraulics.PumpSet{Series: tc.series}
			for range tc.n {
				set.Members = append(set.Members, hydraulics.SetMember{Curve: c})
			}
			n := New(water20)
			s, ret := n.AddNode("s"), n.AddNode("r")
			n.FixPressure(ret, 1.5e5)
			p := n.AddLink("pump", ret, s, set)
			n.AddLink("load", s, ret, quad{b * rg})
			sol := mustSolve(t, n, nil)
			if relErr(sol.Flow[p], tc.want) > 1e-9 {
				t.Errorf("flow = %.12g m3/s, want %.12g", sol.Flow[p], tc.want)
			}
		})
	}
}
