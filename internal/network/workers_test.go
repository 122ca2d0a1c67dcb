package network

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"
)

// TestSolveWorkersSame solves a 3,000-branch ladder (about 9,000 links,
// five of evaluate's tasks) cold and warm on one, two and three goroutines
// (Options.Workers) and wants the solutions and a sensitivity equal to the
// bit; then, with a broken element on two branches in different tasks,
// wants every worker count to name the first of them. The reference is the
// one-goroutine solve (an equality needs no outside source).
func TestSolveWorkersSame(t *testing.T) {
	if testing.Short() {
		t.Skip("solves a 3,000-branch ladder six times")
	}
	bt := benchLadder(t, 3000)
	net := bt.Net
	if nl := net.NumLinks(); nl <= 2*evalChunk {
		t.Fatalf("%d links: want more than two of evaluate's tasks", nl)
	}
	type run struct {
		cold, warm *Solution
		dq, dp     []float64
	}
	var runs []run
	for _, w := range []int{1, 2, 3} {
		cold := mustSolve(t, net, &Options{Workers: w})
		init := append([]float64(nil), cold.Flow...)
		for i := range init {
			init[i] *= 1.1
		}
		warm := mustSolve(t, net, &Options{Workers: w, Initial: init})
		dh := make([]float64, net.NumLinks())
		dh[bt.Branch["b1500"]] = 100
		dq, dp, err := warm.Sensitivity(dh)
		if err != nil {
			t.Fatal(err)
		}
		runs = append(runs, run{cold, warm, dq, dp})
	}
	opt := []cmp.Option{cmpopts.IgnoreUnexported(Solution{}), cmp.AllowUnexported(run{})}
	for k, r := range runs[1:] {
		if d := cmp.Diff(runs[0], r, opt...); d != "" {
			t.Errorf("workers %d differ from 1 (-1 +%d):\n%s", k+2, k+2, d)
		}
	}

	// Broken elements on b2900 (the last task) and b100 (the first):
	// the error names b100 however the tasks fall.
	for _, id := range []string{"b2900", "b100"} {
		l := bt.Branch[id]
		net.links[l].elems = append(net.links[l].elems, nanElem{})
	}
	want := fmt.Sprintf("link %q at", net.links[bt.Branch["b100"]].id)
	for _, w := range []int{1, 2, 3} {
		_, err := net.Solve(context.Background(), &Options{Workers: w})
		if !errors.Is(err, ErrElement) || !strings.Contains(err.Error(), want) {
			t.Errorf("workers %d: error %v, want ErrElement with %s", w, err, want)
		}
	}
}
