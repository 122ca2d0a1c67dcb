package network

import (
	"errors"
	"math"
	"testing"

	"flowset/internal/hydraulics"
)

// ladderR holds square-law coefficients of a ladder: a[k] supply segment,
// b[k] branch, c[k] return segment of branch k (c[0] is the reverse-return
// leg for ReverseReturn).
type ladderR struct{ a, b, c []float64 }

func (lr ladderR) ladder(arr Arrangement) Ladder {
	l := Ladder{Arrangement: arr}
	for k := range lr.b {
		l.Branches = append(l.Branches, Branch{
			ID:       string(rune('A' + k)),
			Elements: []Element{quad{lr.b[k]}},
			Supply:   []Element{quad{lr.a[k]}},
			Return:   []Element{quad{lr.c[k]}},
		})
	}
	return l
}

var threeBranches = ladderR{
	a: []float64{2e8, 4e8, 6e8},
	b: []float64{1e10, 1.5e10, 0.8e10},
	c: []float64{3e8, 5e8, 7e8},
}

// directReturnFlows is an independent closed form for a direct-return
// ladder of square-law elements under a differential dp: marching from the
// far end, the far branch alone has R = b[N-1]; at take-off k the branch is
// in parallel with the rest seen through segments k+1 (series: R = Σ R_i;
// parallel: R = 1/(Σ 1/sqrt(R_i))², both exact for pure square-law
// elements, textbook). Then Q = sqrt(dp/(a0 + c0 + R_0)) and each take-off
// splits its inflow by q_k = sqrt(R_k Q_k² / b_k).
func directReturnFlows(lr ladderR, dp float64) (branch []float64, total float64) {
	nb := len(lr.b)
	req := make([]float64, nb)
	req[nb-1] = lr.b[nb-1]
	par := func(x, y float64) float64 { s := 1/math.Sqrt(x) + 1/math.Sqrt(y); return 1 / (s * s) }
	for k := nb - 2; k >= 0; k-- {
		req[k] = par(lr.b[k], lr.a[k+1]+lr.c[k+1]+req[k+1])
	}
	total = math.Sqrt(dp / (lr.a[0] + lr.c[0] + req[0]))
	q := total
	for k := range nb {
		branch = append(branch, math.Sqrt(req[k]*q*q/lr.b[k]))
		q -= branch[k]
	}
	return branch, total
}

func TestLadderDirectReturn(t *testing.T) {
	const dp = 3e4
	want, total := directReturnFlows(threeBranches, dp)
	bt, err := Build(threeBranches.ladder(DirectReturn), Source{Differential: dp, Static: 2e5}, water20)
	if err != nil {
		t.Fatal(err)
	}
	sol := mustSolve(t, bt.Net, nil)
	for k, id := range []string{"A", "B", "C"} {
		if got := sol.Flow[bt.Branch[id]]; relErr(got, want[k]) > 1e-9 {
			t.Errorf("branch %s flow = %.12g, want %.12g", id, got, want[k])
		}
	}
	if got := sol.Flow[bt.Headers[0]]; relErr(got, total) > 1e-9 {
		t.Errorf("first supply segment flow = %.12g, want %.12g", got, total)
	}
	// Near branches see the larger differential in direct return.
	dA := sol.Pressure[bt.SupplyNode["A"]] - sol.Pressure[bt.ReturnNode["A"]]
	dC := sol.Pressure[bt.SupplyNode["C"]] - sol.Pressure[bt.ReturnNode["C"]]
	if !(dA > dC) {
		t.Errorf("branch differentials A %g, C %g: want A > C in direct return", dA, dC)
	}
	checkBalance(t, bt.Net, sol, 1e-9)
}

// TestLadderNoHeaderLoss: with ideal headers every branch sees the source
// differential, q_k = sqrt(dp/b_k) (parallel closed form).
func TestLadderNoHeaderLoss(t *testing.T) {
	const dp = 3e4
	bt, err := Build(threeBranches.ladder(NoHeaderLoss), Source{Differential: dp}, water20)
	if err != nil {
		t.Fatal(err)
	}
	if len(bt.Headers) != 0 || bt.Net.NumNodes() != 2 {
		t.Errorf("no-header-loss ladder has %d headers and %d nodes, want 0 and 2", len(bt.Headers), bt.Net.NumNodes())
	}
	sol := mustSolve(t, bt.Net, nil)
	for k, id := range []string{"A", "B", "C"} {
		want := math.Sqrt(dp / threeBranches.b[k])
		if got := sol.Flow[bt.Branch[id]]; relErr(got, want) > 1e-9 {
			t.Errorf("branch %s flow = %.12g, want %.12g", id, got, want)
		}
	}
}

func TestBuildErrors(t *testing.T) {
	ok := Branch{ID: "x", Elements: []Element{quad{1}}}
	self := &Ladder{}
	self.Branches = []Branch{{ID: "r", Sub: self}}
	cases := []struct {
		name string
		l    Ladder
		src  Source
	}{
		{"no branches", Ladder{}, Source{Differential: 1}},
		{"no differential", Ladder{Branches: []Branch{ok}}, Source{}},
		{"empty id", Ladder{Branches: []Branch{{Elements: ok.Elements}}}, Source{Differential: 1}},
		{"duplicate id", Ladder{Branches: []Branch{ok, ok}}, Source{Differential: 1}},
		{"no elements", Ladder{Branches: []Branch{{ID: "y"}}}, Source{Differential: 1}},
		{"unknown arrangement", Ladder{Arrangement: 9, Branches: []Branch{ok}}, Source{Differential: 1}},
		{"self-nested", *self, Source{Differential: 1}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if _, err := Build(c.l, c.src, water20); !errors.Is(err, ErrInput) {
				t.Errorf("Build error = %v, want ErrInput", err)
			}
		})
	}
}

// hardyCross solves square-law networks by the loop-flow corrections of H.
// Cross (Univ. of Illinois Eng. Exp. Station Bulletin 286, 1936; references
// §8.1): starting from flows that satisfy continuity, each loop's flows are
// corrected by ΔQ = -Σ s r Q|Q| / Σ 2 r |Q| until the corrections vanish. A
// loop's constant is a fixed pressure rise along it (a pseudo-loop through
// a constant-differential boundary). It shares nothing with Solve.
type hcLoop struct {
	links    []int
	signs    []float64
	constant float64 // Σ s r Q|Q| + constant = 0 around the loop
}

func hardyCross(r, q []float64, loops []hcLoop) []float64 {
	q = append([]float64(nil), q...)
	for range 100000 {
		var worst, scale float64
		for _, lp := range loops {
			num, den := lp.constant, 0.0
			for k, i := range lp.links {
				num += lp.signs[k] * r[i] * q[i] * math.Abs(q[i])
				den += 2 * r[i] * math.Abs(q[i])
			}
			dq := -num / den
			for k, i := range lp.links {
				q[i] += lp.signs[k] * dq
				scale = max(scale, math.Abs(q[i]))
			}
			worst = max(worst, math.Abs(dq))
		}
		if worst <= 1e-15*scale {
			break
		}
	}
	return q
}

// TestLadderReverseReturn checks a three-branch reverse-return ladder
// against Hardy Cross loop iteration. Links (square law): a0 S->s0, a1
// s0->s1, a2 s1->s2, b_k s_k->r_k, c1 r0->r1, c2 r1->r2, leg r2->R. Loops:
// b_k + c_{k+1} - b_{k+1} - a_{k+1} = 0 for k = 0, 1, and the pseudo-loop
// a0 + b0 + c1 + c2 + leg = dp through the fixed boundary.
func TestLadderReverseReturn(t *testing.T) {
	const dp = 3e4
	lr := threeBranches
	// Indices into r/q: 0-2 a, 3-5 b, 6 leg, 7 c1, 8 c2.
	r := []float64{lr.a[0], lr.a[1], lr.a[2], lr.b[0], lr.b[1], lr.b[2], lr.c[0], lr.c[1], lr.c[2]}
	q0 := []float64{3e-3, 2e-3, 1e-3, 1e-3, 1e-3, 1e-3, 3e-3, 1e-3, 2e-3}
	loops := []hcLoop{
		{links: []int{3, 7, 4, 1}, signs: []float64{1, 1, -1, -1}},
		{links: []int{4, 8, 5, 2}, signs: []float64{1, 1, -1, -1}},
		{links: []int{0, 3, 7, 8, 6}, signs: []float64{1, 1, 1, 1, 1}, constant: -dp},
	}
	want := hardyCross(r, q0, loops)

	bt, err := Build(lr.ladder(ReverseReturn), Source{Differential: dp}, water20)
	if err != nil {
		t.Fatal(err)
	}
	sol := mustSolve(t, bt.Net, nil)
	for k, id := range []string{"A", "B", "C"} {
		if got := sol.Flow[bt.Branch[id]]; relErr(got, want[3+k]) > 1e-9 {
			t.Errorf("branch %s flow = %.12g, want %.12g (Hardy Cross)", id, got, want[3+k])
		}
	}
	leg, ok := bt.Net.LinkIndex("A.return-header")
	if !ok {
		t.Fatal("no return leg link")
	}
	if got := sol.Flow[leg]; relErr(got, want[6]) > 1e-9 {
		t.Errorf("return leg flow = %.12g, want %.12g (Hardy Cross)", got, want[6])
	}
	// The first branch supplied is the last returned: the return leg leaves
	// from the last branch's return node.
	if from, to := bt.Net.LinkEnds(leg); from != bt.ReturnNode["C"] || bt.Net.NodeID(to) != ReturnID {
		t.Errorf("return leg runs %q -> %q, want C.return -> %s", bt.Net.NodeID(from), bt.Net.NodeID(to), ReturnID)
	}
	checkBalance(t, bt.Net, sol, 1e-9)
}

// TestHardyCrossDirect cross-checks the two independent oracles: Hardy
// Cross on the direct-return ladder agrees with the closed-form recursion.
func TestHardyCrossDirect(t *testing.T) {
	const dp = 3e4
	lr := threeBranches
	// 0-2 a, 3-5 b, 6-8 c (c_k r_k -> r_{k-1}, c0 r0 -> R).
	r := []float64{lr.a[0], lr.a[1], lr.a[2], lr.b[0], lr.b[1], lr.b[2], lr.c[0], lr.c[1], lr.c[2]}
	q0 := []float64{3e-3, 2e-3, 1e-3, 1e-3, 1e-3, 1e-3, 3e-3, 2e-3, 1e-3}
	loops := []hcLoop{
		// b_k = a_{k+1} + b_{k+1} + c_{k+1}
		{links: []int{3, 1, 4, 7}, signs: []float64{-1, 1, 1, 1}},
		{links: []int{4, 2, 5, 8}, signs: []float64{-1, 1, 1, 1}},
		{links: []int{0, 3, 6}, signs: []float64{1, 1, 1}, constant: -dp},
	}
	hc := hardyCross(r, q0, loops)
	cf, _ := directReturnFlows(lr, dp)
	for k := range cf {
		if relErr(hc[3+k], cf[k]) > 1e-9 {
			t.Errorf("branch %d: Hardy Cross %.12g, closed form %.12g", k, hc[3+k], cf[k])
		}
	}
}

// TestLadderNested: a riser r_s feeding a sub-ladder of ideal headers with
// branches s_i, beside a plain branch b, all under a differential dp. By the
// series and parallel rules for square-law elements (exact, textbook), the
// riser path has R = r_s + 1/(Σ 1/sqrt(s_i))², its flow is sqrt(dp/R), the
// sub-branches split it as q_i = Q/(sqrt(s_i) Σ 1/sqrt(s_j)), and b carries
// sqrt(dp/b).
func TestLadderNested(t *testing.T) {
	const dp, rs, rb = 4e4, 3e9, 2e10
	sub := []float64{1e10, 2.5e10, 4e10}
	inner := Ladder{Arrangement: NoHeaderLoss}
	var sum float64
	for i, r := range sub {
		inner.Branches = append(inner.Branches, Branch{ID: "riser/" + string(rune('a'+i)), Elements: []Element{quad{r}}})
		sum += 1 / math.Sqrt(r)
	}
	l := Ladder{Arrangement: DirectReturn, Branches: []Branch{
		{ID: "plain", Elements: []Element{quad{rb}}},
		{ID: "riser", Elements: []Element{quad{rs}}, Sub: &inner},
	}}
	bt, err := Build(l, Source{Differential: dp}, water20)
	if err != nil {
		t.Fatal(err)
	}
	sol := mustSolve(t, bt.Net, nil)
	qr := math.Sqrt(dp / (rs + 1/(sum*sum)))
	if got := sol.Flow[bt.Branch["riser"]]; relErr(got, qr) > 1e-9 {
		t.Errorf("riser flow = %.12g, want %.12g", got, qr)
	}
	for i, r := range sub {
		id := "riser/" + string(rune('a'+i))
		want := qr / (math.Sqrt(r) * sum)
		if got := sol.Flow[bt.Branch[id]]; relErr(got, want) > 1e-9 {
			t.Errorf("sub-branch %s flow = %.12g, want %.12g", id, got, want)
		}
		if bt.ReturnNode[id] != bt.ReturnNode["riser"] {
			t.Errorf("sub-branch %s returns to node %d, want the riser's return take-off %d", id, bt.ReturnNode[id], bt.ReturnNode["riser"])
		}
	}
	if got, want := sol.Flow[bt.Branch["plain"]], math.Sqrt(dp/rb); relErr(got, want) > 1e-9 {
		t.Errorf("plain branch flow = %.12g, want %.12g", got, want)
	}
}

// TestLadderClosedValve: a branch whose valve is shut (hydraulics.Valve at
// setting 0 passes only its seat leakage) takes almost no flow, and the
// other branches see the differential they would without it.
func TestLadderClosedValve(t *testing.T) {
	const dp = 3e4
	shut := hydraulics.Valve{Char: hydraulics.Inherent{Kind: hydraulics.Linear, Kvs: 2.5, Rangeability: 1e6}, Setting: 0}
	l := Ladder{Arrangement: NoHeaderLoss, Branches: []Branch{
		{ID: "open", Elements: []Element{quad{1e10}}},
		{ID: "shut", Elements: []Element{quad{1e10}, shut}},
	}}
	bt, err := Build(l, Source{Differential: dp}, water20)
	if err != nil {
		t.Fatal(err)
	}
	sol := mustSolve(t, bt.Net, nil)
	if got, want := sol.Flow[bt.Branch["open"]], math.Sqrt(dp/1e10); relErr(got, want) > 1e-9 {
		t.Errorf("open branch flow = %.12g, want %.12g", got, want)
	}
	// Leakage Kv = LeakageFraction·Kvs; Δp[bar] = (Q[m3/h]/Kv)² (references §3.1)
	// in series with the 1e10 resistance.
	kv := hydraulics.LeakageFraction * 2.5
	q := sol.Flow[bt.Branch["shut"]]
	dv, _ := hydraulics.KvDrop(q, kv, water20.Density)
	if relErr(1e10*q*q+dv, dp) > 1e-9 {
		t.Errorf("shut branch: drop %g at flow %g, want %g", 1e10*q*q+dv, q, dp)
	}
	if want := kv / 3600 * math.Sqrt(dp/1e5*hydraulics.KvRefDensity/water20.Density); relErr(q, want) > 1e-3 {
		t.Errorf("shut branch flow = %g, want about the leakage %g", q, want)
	}
}
