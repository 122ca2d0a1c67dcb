package network

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"flowset/internal/hydraulics"
)

func logUniform(rng *rand.Rand, lo, hi float64) float64 {
	return lo * math.Exp(rng.Float64()*math.Log(hi/lo))
}

// randomElement returns a branch-like element: square law, laminar, or a
// real pipe, terminal or fixed Kv.
func randomElement(rng *rand.Rand) Element {
	switch rng.IntN(5) {
	case 0:
		return quad{logUniform(rng, 1e9, 1e11)}
	case 1:
		return lin{logUniform(rng, 1e6, 1e8)}
	case 2:
		return hydraulics.Pipe{Bore: logUniform(rng, 0.012, 0.05), Length: logUniform(rng, 1, 40), Roughness: 4.5e-5}
	case 3:
		return hydraulics.Terminal{RatedDrop: logUniform(rng, 3e3, 3e4), RatedFlow: logUniform(rng, 1e-4, 1e-3)}
	default:
		return hydraulics.FixedKv{Kv: logUniform(rng, 0.5, 10)}
	}
}

func randomSegment(rng *rand.Rand) []Element {
	switch rng.IntN(4) {
	case 0:
		return nil
	case 1:
		return []Element{quad{logUniform(rng, 1e6, 1e8)}}
	default:
		return []Element{hydraulics.Pipe{Bore: logUniform(rng, 0.04, 0.1), Length: logUniform(rng, 2, 20), Roughness: 4.5e-5}}
	}
}

func randomLadder(rng *rand.Rand, depth int, prefix string, nested bool) Ladder {
	l := Ladder{Arrangement: Arrangement(rng.IntN(3))}
	nb := 1 + rng.IntN(8)
	for k := range nb {
		br := Branch{ID: fmt.Sprintf("%s%d", prefix, k), Supply: randomSegment(rng), Return: randomSegment(rng)}
		for range 1 + rng.IntN(3) {
			br.Elements = append(br.Elements, randomElement(rng))
		}
		if nested && depth < 2 && rng.Float64() < 0.3 {
			sub := randomLadder(rng, depth+1, br.ID+"/", nested)
			br.Sub = &sub
			if rng.IntN(2) == 0 {
				br.Elements = nil
			} else {
				br.Elements = randomSegment(rng)
			}
		}
		l.Branches = append(l.Branches, br)
	}
	return l
}

func randomSource(rng *rand.Rand) Source {
	src := Source{Static: 1.5e5}
	if rng.IntN(2) == 0 {
		src.Pump = pumpQuad{h0: logUniform(rng, 2e4, 1e5), a: logUniform(rng, 1e7, 1e9)}
	} else {
		src.Differential = logUniform(rng, 5e3, 8e4)
	}
	if rng.IntN(2) == 0 {
		src.Main = []Element{hydraulics.Pipe{Bore: 0.1, Length: logUniform(rng, 5, 50), Roughness: 4.5e-5}}
	}
	return src
}

// TestRandomNetworks: on random ladders, nested trees of ladders and
// networks with extra cross-links that make loops, continuity holds at
// every node and the drops sum to zero around every loop (checkBalance,
// recomputed from the elements) to 1e-9 relative.
func TestRandomNetworks(t *testing.T) {
	rng := rand.New(rand.NewPCG(20260512, 1))
	kinds := []struct {
		name       string
		nested     bool
		crossLinks int
	}{
		{"ladder", false, 0},
		{"nested", true, 0},
		{"cross-linked", true, 6},
	}
	for _, kind := range kinds {
		t.Run(kind.name, func(t *testing.T) {
			for trial := range 60 {
				l := randomLadder(rng, 0, "b", kind.nested)
				bt, err := Build(l, randomSource(rng), water20)
				if err != nil {
					t.Fatalf("trial %d: Build: %v", trial, err)
				}
				net := bt.Net
				for c := range rng.IntN(kind.crossLinks + 1) {
					a, b := rng.IntN(net.NumNodes()), rng.IntN(net.NumNodes())
					if a == b {
						continue
					}
					net.AddLink(fmt.Sprintf("cross%d", c), a, b, quad{logUniform(rng, 1e8, 1e10)})
				}
				sol := mustSolve(t, net, nil)
				checkBalance(t, net, sol, 1e-9)
				if t.Failed() {
					t.Fatalf("trial %d failed (%d nodes, %d links)", trial, net.NumNodes(), net.NumLinks())
				}
			}
		})
	}
}

// TestStarvedLadder: a long direct-return ladder on nearly ideal headers
// whose pump cannot feed the far branches leaves thousands of square-law
// links near zero flow, and the cold start's secants span over 20 decades;
// the solve must still factorise and balance (this once failed with an
// indefinite node matrix).
func TestStarvedLadder(t *testing.T) {
	l := Ladder{Arrangement: DirectReturn}
	for k := range 10000 {
		l.Branches = append(l.Branches, Branch{ID: fmt.Sprint(k), Elements: []Element{quad{1e10}},
			Supply: []Element{quad{1e2}}, Return: []Element{quad{1e2}}})
	}
	bt, err := Build(l, Source{Pump: pumpQuad{1e5, 1e3}}, water20)
	if err != nil {
		t.Fatal(err)
	}
	sol := mustSolve(t, bt.Net, nil)
	checkBalance(t, bt.Net, sol, 1e-9)
	if near, far := sol.Flow[bt.Branch["0"]], sol.Flow[bt.Branch["9999"]]; !(far < 1e-3*near) {
		t.Errorf("near branch %g, far branch %g m3/s: want the far end starved", near, far)
	}
}
