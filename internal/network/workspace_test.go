package network

import (
	"context"
	"sync"
	"testing"
)

// workspaceNet is a small demand network with two fixed nodes: a source
// held at p0 feeding a grid of square-law links, and an outlet.
func workspaceNet(p0, demand float64) *Network {
	n := New(water20)
	src := n.AddNode("src")
	a := n.AddNode("a")
	b := n.AddNode("b")
	c := n.AddNode("c")
	out := n.AddNode("out")
	n.AddLink("src-a", src, a, quad{1e9})
	n.AddLink("a-b", a, b, quad{2e9})
	n.AddLink("a-c", a, c, quad{3e9}, lin{1e6})
	n.AddLink("b-c", b, c, quad{4e9})
	n.AddLink("c-out", c, out, quad{1e9})
	n.FixPressure(src, p0)
	n.FixPressure(out, 1e5)
	n.SetDemand(b, demand)
	return n
}

// TestSolveReusesWorkspace checks that a network solved again after its
// boundary values changed (re-using the scratch memory of the first solve)
// gives bit for bit what a freshly built network gives, cold and warm.
func TestSolveReusesWorkspace(t *testing.T) {
	n := workspaceNet(3e5, 1e-4)
	first := mustSolve(t, n, nil)
	dh := []float64{1, 0, -2, 0, 3}
	before, _, err := first.Sensitivity(dh)
	if err != nil {
		t.Fatal(err)
	}
	n.FixPressure(0, 4e5)
	n.SetDemand(2, -2e-4)
	for _, opt := range []*Options{nil, {Initial: first.Flow}} {
		again := mustSolve(t, n, opt)
		fresh := mustSolve(t, func() *Network { f := workspaceNet(4e5, -2e-4); mustSolve(t, f, nil); return f }(), opt)
		if again.Iterations != fresh.Iterations {
			t.Errorf("re-solve took %d iterations, a fresh network %d", again.Iterations, fresh.Iterations)
		}
		for i := range again.Flow {
			if again.Flow[i] != fresh.Flow[i] {
				t.Errorf("link %d: re-solved flow %v, fresh network %v", i, again.Flow[i], fresh.Flow[i])
			}
		}
		for i := range again.Pressure {
			if again.Pressure[i] != fresh.Pressure[i] {
				t.Errorf("node %d: re-solved pressure %v, fresh network %v", i, again.Pressure[i], fresh.Pressure[i])
			}
		}
		checkBalance(t, n, again, 1e-12)
	}
	// A solution keeps its own factor: the first solution's sensitivities
	// are unchanged by the later solves.
	after, _, err := first.Sensitivity(dh)
	if err != nil {
		t.Fatal(err)
	}
	for i := range before {
		if before[i] != after[i] {
			t.Errorf("sensitivity %d of the first solution changed from %v to %v after later solves", i, before[i], after[i])
		}
	}
}

// TestConcurrentSolves runs solves of one network from several goroutines
// (the race detector checks the shared scratch memory); all must agree.
func TestConcurrentSolves(t *testing.T) {
	n := workspaceNet(3e5, 1e-4)
	want := mustSolve(t, n, nil)
	var wg sync.WaitGroup
	errs := make(chan string, 8)
	for range 8 {
		wg.Go(func() {
			for range 20 {
				sol, err := n.Solve(context.Background(), nil)
				if err != nil {
					errs <- err.Error()
					return
				}
				for i := range sol.Flow {
					if sol.Flow[i] != want.Flow[i] {
						errs <- "flows differ"
						return
					}
				}
			}
		})
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Error(e)
	}
}
