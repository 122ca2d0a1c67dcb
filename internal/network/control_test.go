package network

import (
	"context"
	"fmt"
	"math"
	"testing"

	"flowset/internal/hydraulics"
)

// TestControllerHoldsThenFalls checks a differential controller on a riser
// against closed forms, the supply differential falling from well above to
// well below what the controller needs. The riser is a partner valve Kv 5 in
// series with two branches Kv 2 and Kv 3 in parallel; square-law Kv
// elements combine as parallel Kv add and series 1/Kv² add (IEC 60534-1's
// definition of Kv, common practice for combining them), so the span is Kv
// 5/√2. While the controller holds, the span reads its set point S; its
// valve is wide open from P* = S (1 + Kv_span²/Kvs²) down, and the span then
// reads P Kvs²/(Kvs² + Kv_span²) (two square laws in series share P in
// proportion to 1/Kv²).
func TestControllerHoldsThenFalls(t *testing.T) {
	const (
		kvs  = 4.0
		set  = 20e3
		span = 5 / math.Sqrt2
	)
	riser := Branch{ID: "R", Elements: []Element{hydraulics.FixedKv{Kv: 5}},
		Sub: &Ladder{Branches: []Branch{
			{ID: "a", Elements: []Element{hydraulics.FixedKv{Kv: 2}}},
			{ID: "b", Elements: []Element{hydraulics.FixedKv{Kv: 3}}},
		}}}
	hold, err := HeldFlow(context.Background(), riser, set, kvWater)
	if err != nil {
		t.Fatal(err)
	}
	// Q = Kv sqrt(dp / 1 bar) m3/h at the reference density.
	if want := span * math.Sqrt(set/1e5) / 3600; relErr(hold, want) > 1e-9 {
		t.Fatalf("held flow %.9g m3/s, want %.9g", hold, want)
	}
	riser.Control = hydraulics.DiffController{Kvs: kvs, SetPoint: set, Hold: hold}
	corner := set * (1 + span*span/(kvs*kvs))
	checkHoldsThenFalls(t, riser, set, corner, func(p float64) float64 { return p * kvs * kvs / (kvs*kvs + span*span) })

	// Sensing across the branches alone (Kv 5 in parallel): the partner
	// valve Kv 5 lies outside the span with the controller's valve, so the
	// span's share of P below the corner is (1/25)/(1/25 + 1/25 + 1/16).
	below := riser
	below.ControlBelow = true
	hold, err = HeldFlow(context.Background(), below, set, kvWater)
	if err != nil {
		t.Fatal(err)
	}
	if want := 5 * math.Sqrt(set/1e5) / 3600; relErr(hold, want) > 1e-9 {
		t.Fatalf("held flow sensing the branches %.9g m3/s, want %.9g", hold, want)
	}
	below.Control = hydraulics.DiffController{Kvs: kvs, SetPoint: set, Hold: hold}
	share := (1.0 / 25) / (1.0/25 + 1.0/25 + 1.0/16)
	checkHoldsThenFalls(t, below, set, set/share, func(p float64) float64 { return p * share })
}

// checkHoldsThenFalls solves riser beside another branch at supply
// differentials across its corner: above it the span reads set, below it
// falls as fall(P).
func checkHoldsThenFalls(t *testing.T, riser Branch, set, corner float64, fall func(float64) float64) {
	t.Helper()
	for _, f := range []float64{3, 1.7, 1.1, 1.001, 0.999, 0.85, 0.4, 0.15} {
		p := f * corner
		t.Run(fmt.Sprintf("below %v, %.0f Pa", riser.ControlBelow, p), func(t *testing.T) {
			l := Ladder{Branches: []Branch{riser, {ID: "other", Elements: []Element{hydraulics.FixedKv{Kv: 6}}}}}
			b, err := Build(l, Source{Differential: p}, kvWater)
			if err != nil {
				t.Fatal(err)
			}
			sol := mustSolve(t, b.Net, nil)
			got, ok := b.ControlledDiff("R", sol)
			if !ok {
				t.Fatal("no controller in the built network")
			}
			c := riser.Control.(hydraulics.DiffController)
			q := sol.Flow[b.Controller["R"]]
			if p > corner {
				// Held, to the controller's droop: 2·ControllerDroop per set
				// point of excess.
				tol := 2.5 * hydraulics.ControllerDroop * (p - corner) / set
				if relErr(got, set) > tol {
					t.Errorf("span reads %.6g Pa, want the set point %.6g within %.2g", got, set, tol)
				}
				if !c.Holding(q) {
					t.Errorf("controller not holding at %g Pa supply", p)
				}
				return
			}
			want := fall(p)
			if relErr(got, want) > 1e-7 {
				t.Errorf("span reads %.9g Pa, want %.9g (wide open)", got, want)
			}
			if c.Holding(q) {
				t.Errorf("controller holding at %g Pa supply, below its corner %g", p, corner)
			}
		})
	}
}

// TestControllersNested puts a controlled riser inside another's span: with
// the supply ample both hold (each span reads its set point, common
// practice, no source: what a controller is for), and the inner one's held
// flow is what the outer one's span passes through it.
func TestControllersNested(t *testing.T) {
	ctx := context.Background()
	inner := Branch{ID: "Q", Elements: []Element{hydraulics.FixedKv{Kv: 8}},
		Sub: &Ladder{Branches: []Branch{{ID: "q1", Elements: []Element{hydraulics.FixedKv{Kv: 2}}}, {ID: "q2", Elements: []Element{hydraulics.FixedKv{Kv: 2.5}}}}}}
	hq, err := HeldFlow(ctx, inner, 15e3, kvWater)
	if err != nil {
		t.Fatal(err)
	}
	inner.Control = hydraulics.DiffController{Kvs: 10, SetPoint: 15e3, Hold: hq}
	outer := Branch{ID: "R", Elements: []Element{hydraulics.FixedKv{Kv: 9}},
		Sub: &Ladder{Branches: []Branch{inner, {ID: "r1", Elements: []Element{hydraulics.FixedKv{Kv: 1.5}}}}}}
	ho, err := HeldFlow(ctx, outer, 30e3, kvWater)
	if err != nil {
		t.Fatal(err)
	}
	outer.Control = hydraulics.DiffController{Kvs: 8, SetPoint: 30e3, Hold: ho}
	b, err := Build(Ladder{Branches: []Branch{outer, {ID: "x", Elements: []Element{hydraulics.FixedKv{Kv: 4}}}}}, Source{Differential: 120e3}, kvWater)
	if err != nil {
		t.Fatal(err)
	}
	sol := mustSolve(t, b.Net, nil)
	for _, c := range []struct {
		id  string
		set float64
	}{{"Q", 15e3}, {"R", 30e3}} {
		got, _ := b.ControlledDiff(c.id, sol)
		// The outer span's differential rises steeply with its flow (the
		// inner controller throttles), so the outer droop moves it more
		// than a plain span's: 0.15 % here, within 0.5 % (a gauge reads
		// ±1 % at best).
		if relErr(got, c.set) > 5e-3 {
			t.Errorf("span of %s reads %.6g Pa, want its set point %.6g", c.id, got, c.set)
		}
	}
	// The inner riser passes its held flow; the outer one's is its span's
	// at its set point, up to the droop: ControllerDroop per set point
	// throttled (about 2.7 set points here).
	if q := sol.Flow[b.Controller["Q"]]; relErr(q, hq) > 1e-3 {
		t.Errorf("inner controller passes %.6g m3/s, held flow %.6g", q, hq)
	}
	if q := sol.Flow[b.Controller["R"]]; relErr(q, ho) > 4*hydraulics.ControllerDroop {
		t.Errorf("outer controller passes %.6g m3/s, held flow %.6g", q, ho)
	}
}
