package network

import (
	"math"
	"testing"
)

// TestOwnSensitivitiesSeries checks OwnSensitivities on two linear
// resistances r1, r2 in series between two fixed pressures: they carry q = Δp/(r1 + r2), so a drop dh added to link 1 changes the
// flow of both by -dh/(r1 + r2) (Ohm's law for resistances in series, any
// circuits textbook). The own response of link 1 is then -1/(r1 + r2), not
// its isolated -1/r1.
func TestOwnSensitivitiesSeries(t *testing.T) {
	const r1, r2 = 3e8, 5e8
	n := New(water20)
	s, m, r := n.AddNode("s"), n.AddNode("m"), n.AddNode("r")
	n.FixPressure(s, 2e5)
	n.FixPressure(r, 0)
	n.AddLink("1", s, m, lin{r1})
	n.AddLink("2", m, r, lin{r2})
	sol := mustSolve(t, n, nil)
	own := make([]float64, n.NumLinks())
	if err := sol.OwnSensitivities(own); err != nil {
		t.Fatal(err)
	}
	for i, got := range own {
		if want := -1 / (r1 + r2); relErr(got, want) > 1e-12 {
			t.Errorf("link %d: own response %.6g, want %.6g", i, got, want)
		}
	}
}

// TestOwnSensitivitiesAgree checks every link's own response against the
// diagonal of Sensitivity (one solve per link) on networks that take each
// factor: the looped network with a pump and a ladder (band), a ladder with risers
// (sparse, minimum degree) and the same on the band (the wide band).
func TestOwnSensitivitiesAgree(t *testing.T) {
	risers := func(band bool) *Network {
		b, err := Build(risersLadder(12, 30, 5), Source{Differential: 200e3}, water20)
		if err != nil {
			t.Fatal(err)
		}
		if band {
			if b.Net.plan, err = b.Net.newPlan(false); err != nil {
				t.Fatal(err)
			}
		}
		return b.Net
	}
	for _, c := range []struct {
		name   string
		net    *Network
		sparse bool
	}{
		{"looped with a pump", sensitivityNet(), false},
		{"ladder", benchLadder(t, 40).Net, false},
		{"risers, sparse", risers(false), true},
		{"risers, band", risers(true), false},
	} {
		t.Run(c.name, func(t *testing.T) {
			sol := mustSolve(t, c.net, nil)
			if got := c.net.plan.sp != nil; got != c.sparse {
				t.Fatalf("sparse factor %v, want %v", got, c.sparse)
			}
			nl := c.net.NumLinks()
			own := make([]float64, nl)
			if err := sol.OwnSensitivities(own); err != nil {
				t.Fatal(err)
			}
			dh := make([]float64, nl)
			for i := range nl {
				dh[i] = 1
				dq, _, err := sol.Sensitivity(dh)
				dh[i] = 0
				if err != nil {
					t.Fatal(err)
				}
				if d := math.Abs(own[i] - dq[i]); d > 1e-9*math.Abs(dq[i]) {
					t.Errorf("link %s: own response %.12g, sensitivity %.12g", c.net.LinkID(i), own[i], dq[i])
				}
			}
		})
	}
}
