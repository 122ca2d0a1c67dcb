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
	for _, p := range []float64{100e3, 60e3, 40e3, corner * 1.001, corner * 0.999, 30e3, 15e3, 5e3} {
		t.Run(fmt.Sprintf("%.0f Pa", p), func(t *testing.T) {
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
			want := p * kvs * kvs / (kvs*kvs + span*span)
			if relErr(got, want) > 1e-7 {
				t.Errorf("span reads %.9g Pa, want %.9g (wide open)", got, want)
			}
			if c.Holding(q) {
				t.Errorf("controller holding at %g Pa supply, below its corner %g", p, corner)
			}
		})
	}
}
