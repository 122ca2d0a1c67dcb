package network

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// bandwidth returns the half bandwidth of the links' adjacency under order.
func bandwidth(links []link, order []int) int {
	pos := make(map[int]int, len(order))
	for p, v := range order {
		pos[v] = p
	}
	k := 0
	for _, l := range links {
		k = max(k, pos[l.from]-pos[l.to], pos[l.to]-pos[l.from])
	}
	return k
}

// TestRCM: reverse Cuthill-McKee recovers the minimal bandwidth of graphs
// whose optimum is known: a path (1), a ladder of two rails with rungs (2),
// a w-wide grid (w); all numbered at random first.
func TestRCM(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	type graph struct {
		name  string
		nn    int
		edges [][2]int
		want  int
	}
	var path, ladder, grid graph
	path = graph{name: "path", nn: 200, want: 1}
	for i := range 199 {
		path.edges = append(path.edges, [2]int{i, i + 1})
	}
	ladder = graph{name: "ladder", nn: 200, want: 2}
	for i := range 100 {
		ladder.edges = append(ladder.edges, [2]int{2 * i, 2*i + 1})
		if i > 0 {
			ladder.edges = append(ladder.edges, [2]int{2 * (i - 1), 2 * i}, [2]int{2*(i-1) + 1, 2*i + 1})
		}
	}
	const w = 6
	grid = graph{name: "grid", nn: w * 40, want: w}
	for r := range 40 {
		for c := range w {
			v := r*w + c
			if c > 0 {
				grid.edges = append(grid.edges, [2]int{v - 1, v})
			}
			if r > 0 {
				grid.edges = append(grid.edges, [2]int{v - w, v})
			}
		}
	}
	for _, g := range []graph{path, ladder, grid} {
		t.Run(g.name, func(t *testing.T) {
			perm := rng.Perm(g.nn)
			var links []link
			for _, e := range g.edges {
				links = append(links, link{from: perm[e[0]], to: perm[e[1]]})
			}
			include := make([]bool, g.nn)
			for i := range include {
				include[i] = true
			}
			order := rcm(newCSR(g.nn, links, nil), include)
			if len(order) != g.nn {
				t.Fatalf("order has %d nodes, want %d", len(order), g.nn)
			}
			if k := bandwidth(links, order); k != g.want {
				t.Errorf("bandwidth %d, want %d", k, g.want)
			}
		})
	}
}

// TestBuildBandwidth: Build's ladders keep a half bandwidth of 2 (supply and
// return take-offs interleaved) at any size and arrangement.
func TestBuildBandwidth(t *testing.T) {
	for _, arr := range []Arrangement{DirectReturn, ReverseReturn} {
		for _, nb := range []int{1, 7, 500} {
			t.Run(fmt.Sprintf("%v/%d", arr, nb), func(t *testing.T) {
				l := Ladder{Arrangement: arr}
				for k := range nb {
					l.Branches = append(l.Branches, Branch{ID: fmt.Sprint(k), Elements: []Element{quad{1e10}},
						Supply: []Element{quad{1e7}}, Return: []Element{quad{1e7}}})
				}
				bt, err := Build(l, Source{Pump: pumpQuad{5e4, 1e6}}, water20)
				if err != nil {
					t.Fatal(err)
				}
				pl, err := bt.Net.prepare()
				if err != nil {
					t.Fatal(err)
				}
				if pl.k > 2 {
					t.Errorf("half bandwidth %d, want at most 2", pl.k)
				}
			})
		}
	}
}
