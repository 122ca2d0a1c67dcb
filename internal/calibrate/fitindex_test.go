package calibrate

import "testing"

// TestObsIndexFollowsShape: the local Jacobian's observation index is
// rebuilt when a functional's terms change between evaluations (a
// controlled pump flat out in one, holding its set point in the next) and
// kept when only the coefficients change. An index kept stale named terms
// that were gone and crashed a trim round of an independent 75-branch plant
// (common practice, no source: the index is checked against the functionals
// it was built from).
func TestObsIndexFollowsShape(t *testing.T) {
	ln := &localNet{from: make([]int, 3), comp: make([]int, 4)}
	sn := &stateNet{obs: []int{0, 1}, lin: []lin{
		{q: []term{{i: 0, c: 1}}, p: []term{{i: 2, c: 1}, {i: 3, c: -1}}},
		{q: []term{{i: 1, c: 2}}, x: []term{{i: 0, c: 1}}},
	}}
	nodeTerms := func(ix *obsIndex, node int) int { return ix.nodeAt[node+1] - ix.nodeAt[node] }
	ix := ln.index(sn, 1)
	if nodeTerms(ix, 2) != 1 || nodeTerms(ix, 3) != 1 {
		t.Fatalf("node terms %d, %d, want 1, 1", nodeTerms(ix, 2), nodeTerms(ix, 3))
	}
	sn.lin[0].p[0].c, sn.lin[1].q[0].c = 5, 7 // coefficients only
	if got := ln.index(sn, 1); got != ix {
		t.Errorf("index rebuilt when only the coefficients changed")
	}
	sn.lin[0].p = nil // the pressure terms are gone (the pump went flat out)
	got := ln.index(sn, 1)
	if got == ix || nodeTerms(got, 2) != 0 || nodeTerms(got, 3) != 0 {
		t.Errorf("index kept its pressure terms after they went: node terms %d, %d", nodeTerms(got, 2), nodeTerms(got, 3))
	}
	sn.lin[1].q[0].i = 2 // the same count on another link
	if again := ln.index(sn, 1); again == got || again.linkAt[3]-again.linkAt[2] != 1 || again.linkAt[2]-again.linkAt[1] != 0 {
		t.Errorf("index not rebuilt when a term moved to another link")
	}
}
