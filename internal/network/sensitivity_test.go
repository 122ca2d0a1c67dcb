package network

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"flowset/internal/hydraulics"
)

// sensitivityNet is a looped network with a pump, real pipes, square-law
// and laminar parts, an unbalanced bridge and two fixed nodes.
func sensitivityNet() *Network {
	n := New(water20)
	r := n.AddNode("r")
	s := n.AddNode("s")
	a, b, c := n.AddNode("a"), n.AddNode("b"), n.AddNode("c")
	n.FixPressure(r, 1.5e5)
	n.AddLink("pump", r, s, pumpQuad{8e4, 5e8})
	n.AddLink("sa", s, a, hydraulics.Pipe{Bore: 0.04, Length: 20, Roughness: 4.5e-5})
	n.AddLink("sb", s, b, quad{2e10})
	n.AddLink("ab", a, b, quad{6e9}, lin{1e6})
	n.AddLink("ac", a, c, hydraulics.Terminal{RatedDrop: 2e4, RatedFlow: 1e-3})
	n.AddLink("bc", b, c, quad{1e10})
	n.AddLink("cr", c, r, hydraulics.Pipe{Bore: 0.05, Length: 30, Roughness: 4.5e-5})
	return n
}

// fdJacobian is the oracle: central finite differences of full solves,
// each link's drop raised and lowered by a constant delta (an offset
// element appended to the link).
func fdJacobian(t *testing.T, n *Network, delta float64) (dq, dp [][]float64) {
	t.Helper()
	opt := &Options{Tol: 1e-14, MaxIter: 200}
	for i := range n.NumLinks() {
		orig := slices.Clone(n.Elements(i))
		n.SetElements(i, append(slices.Clone(orig), offset{delta})...)
		plus := mustSolve(t, n, opt)
		n.SetElements(i, append(slices.Clone(orig), offset{-delta})...)
		minus := mustSolve(t, n, opt)
		n.SetElements(i, orig...)
		cq := make([]float64, n.NumLinks())
		for j := range cq {
			cq[j] = (plus.Flow[j] - minus.Flow[j]) / (2 * delta)
		}
		cp := make([]float64, n.NumNodes())
		for j := range cp {
			cp[j] = (plus.Pressure[j] - minus.Pressure[j]) / (2 * delta)
		}
		dq, dp = append(dq, cq), append(dp, cp)
	}
	return dq, dp
}

func maxAbs(x []float64) float64 {
	var m float64
	for _, v := range x {
		m = max(m, math.Abs(v))
	}
	return m
}

func TestSensitivityFiniteDifference(t *testing.T) {
	n := sensitivityNet()
	sol := mustSolve(t, n, &Options{Tol: 1e-14, MaxIter: 200})
	fq, fp := fdJacobian(t, n, 1) // 1 Pa against drops of 1e4 Pa
	nl := n.NumLinks()
	for i := range nl {
		dh := make([]float64, nl)
		dh[i] = 1
		dq, dp, err := sol.Sensitivity(dh)
		if err != nil {
			t.Fatal(err)
		}
		sq, sp := maxAbs(fq[i]), maxAbs(fp[i])
		for j := range dq {
			if math.Abs(dq[j]-fq[i][j]) > 1e-6*sq {
				t.Errorf("dq[%s]/dh[%s] = %.9g, finite difference %.9g", n.LinkID(j), n.LinkID(i), dq[j], fq[i][j])
			}
		}
		for j := range dp {
			if math.Abs(dp[j]-fp[i][j]) > 1e-6*sp {
				t.Errorf("dp[%s]/dh[%s] = %.9g, finite difference %.9g", n.NodeID(j), n.LinkID(i), dp[j], fp[i][j])
			}
		}
	}

	// SensitivityT against the transpose of the same oracle.
	rng := rand.New(rand.NewPCG(7, 7))
	wq := make([]float64, nl)
	wp := make([]float64, n.NumNodes())
	for j := range wq {
		wq[j] = rng.NormFloat64() * 1e4 // flows ~1e-3, pressures ~1e4: comparable terms
	}
	for j := range wp {
		wp[j] = rng.NormFloat64() * 1e-6
	}
	g, err := sol.SensitivityT(wq, wp)
	if err != nil {
		t.Fatal(err)
	}
	want := make([]float64, nl)
	for i := range nl {
		for j := range wq {
			want[i] += wq[j] * fq[i][j]
		}
		for j := range wp {
			want[i] += wp[j] * fp[i][j]
		}
	}
	scale := maxAbs(want)
	for i := range g {
		if math.Abs(g[i]-want[i]) > 1e-6*scale {
			t.Errorf("SensitivityT[%s] = %.9g, finite difference %.9g", n.LinkID(i), g[i], want[i])
		}
	}
}

// TestSensitivityAdjoint: on random cross-linked networks the transpose
// product satisfies wᵀ(J dh) = (Jᵀw)ᵀ dh (the defining identity of the
// adjoint) to round-off.
func TestSensitivityAdjoint(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 3))
	for trial := range 20 {
		bt, err := Build(randomLadder(rng, 0, "b", true), randomSource(rng), water20)
		if err != nil {
			t.Fatal(err)
		}
		n := bt.Net
		sol := mustSolve(t, n, nil)
		nl, nn := n.NumLinks(), n.NumNodes()
		dh, wq, wp := make([]float64, nl), make([]float64, nl), make([]float64, nn)
		for i := range dh {
			dh[i], wq[i] = rng.NormFloat64(), rng.NormFloat64()
		}
		for i := range wp {
			wp[i] = rng.NormFloat64() * 1e-7
		}
		dq, dp, err := sol.Sensitivity(dh)
		if err != nil {
			t.Fatal(err)
		}
		g, err := sol.SensitivityT(wq, wp)
		if err != nil {
			t.Fatal(err)
		}
		var lhs, rhs, mag float64
		for i := range dq {
			lhs += wq[i] * dq[i]
			mag += math.Abs(wq[i] * dq[i])
		}
		for i := range dp {
			lhs += wp[i] * dp[i]
			mag += math.Abs(wp[i] * dp[i])
		}
		for i := range g {
			rhs += g[i] * dh[i]
		}
		if math.Abs(lhs-rhs) > 1e-10*mag {
			t.Errorf("trial %d: wᵀ(J dh) = %.15g, (Jᵀw)ᵀdh = %.15g", trial, lhs, rhs)
		}
	}
}

func TestSensitivityErrors(t *testing.T) {
	n := sensitivityNet()
	sol := mustSolve(t, n, nil)
	if _, _, err := sol.Sensitivity([]float64{1}); err == nil {
		t.Error("Sensitivity with a short vector: no error")
	}
	if _, err := sol.SensitivityT(nil, []float64{1}); err == nil {
		t.Error("SensitivityT with a short vector: no error")
	}
	if g, err := sol.SensitivityT(nil, nil); err != nil || maxAbs(g) != 0 {
		t.Errorf("SensitivityT(nil, nil) = %v, %v; want zeros", g, err)
	}
}
