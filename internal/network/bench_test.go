package network

import (
	"context"
	"flowset/internal/cpuclock"
	"fmt"
	"math"
	"slices"
	"testing"

	"flowset/internal/hydraulics"
)

// benchLadder is a direct-return ladder of nb branches, each a terminal
// (10 kPa at 0.36 m3/h), an equal-percentage valve and 6 m of DN15 pipe, on
// headers sized for about 1 m/s with 1 m segments, driven by a pump whose
// curve meets the estimated design head at the design flow. The valve is
// made by NewValve, as plant makes its valves.
func benchLadder(tb testing.TB, nb int) *Built {
	const qd = 1e-4 // m3/s per branch
	valve, err := hydraulics.NewValve(hydraulics.Inherent{Kind: hydraulics.EqualPercentage, Kvs: 2.5, Rangeability: 50}, 0.8, 0)
	if err != nil {
		tb.Fatal(err)
	}
	l := Ladder{Arrangement: DirectReturn}
	var header float64 // design drop of supply + return headers to the far branch
	for k := range nb {
		flow := float64(nb-k) * qd
		seg := hydraulics.Pipe{Bore: math.Sqrt(4 * flow / math.Pi), Length: 1, Roughness: 4.5e-5}
		d, _ := seg.Drop(flow, water20)
		header += 2 * d
		l.Branches = append(l.Branches, Branch{
			ID: fmt.Sprintf("b%d", k),
			Elements: []Element{
				hydraulics.Terminal{RatedDrop: 1e4, RatedFlow: qd},
				valve,
				hydraulics.Pipe{Bore: 0.0161, Length: 6, Roughness: 4.5e-5},
			},
			Supply: []Element{seg},
			Return: []Element{seg},
		})
	}
	var branch float64
	for _, e := range l.Branches[0].Elements {
		d, _ := e.Drop(qd, water20)
		branch += d
	}
	// Head in m at design: H = A0 + A2 Q² with A0 = 1.25 H.
	qTot := float64(nb) * qd
	h := (branch + header) / (water20.Density * hydraulics.StandardGravity)
	pump := hydraulics.Pump{Curve: hydraulics.PumpCurve{A0: 1.25 * h, A2: -0.25 * h / (qTot * qTot), QMax: 2 * qTot}}
	bt, err := Build(l, Source{Pump: pump, Static: 1.5e5}, water20)
	if err != nil {
		tb.Fatal(err)
	}
	return bt
}

func BenchmarkSolve(b *testing.B) {
	for _, nb := range []int{10, 100, 1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", nb), func(b *testing.B) {
			bt := benchLadder(b, nb)
			var iters int
			b.ReportAllocs()
			cpu := cpuclock.Start()
			for b.Loop() {
				sol, err := bt.Net.Solve(context.Background(), nil)
				if err != nil {
					b.Fatal(err)
				}
				iters = sol.Iterations
			}
			cpu.Report(b)
			b.ReportMetric(float64(iters), "newton-steps")
		})
	}
}

// BenchmarkSolveWarm re-solves after one valve setting changed, starting
// from the previous flows, as balancing and calibration do.
func BenchmarkSolveWarm(b *testing.B) {
	for _, nb := range []int{10, 100, 1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", nb), func(b *testing.B) {
			bt := benchLadder(b, nb)
			sol, err := bt.Net.Solve(context.Background(), nil)
			if err != nil {
				b.Fatal(err)
			}
			link := bt.Branch["b0"]
			elems := slices.Clone(bt.Net.Elements(link))
			v := elems[1].(hydraulics.Valve)
			v.Setting = 0.7
			elems[1] = v
			bt.Net.SetElements(link, elems...)
			opt := &Options{Initial: sol.Flow}
			var iters int
			b.ReportAllocs()
			cpu := cpuclock.Start()
			for b.Loop() {
				s, err := bt.Net.Solve(context.Background(), opt)
				if err != nil {
					b.Fatal(err)
				}
				iters = s.Iterations
			}
			cpu.Report(b)
			b.ReportMetric(float64(iters), "newton-steps")
		})
	}
}

// BenchmarkBuild makes the network of a direct-return ladder, as plant
// does before each cold solve.
func BenchmarkBuild(b *testing.B) {
	for _, nb := range []int{1000, 10000, 100000} {
		b.Run(fmt.Sprintf("branches=%d", nb), func(b *testing.B) {
			bt := benchLadder(b, nb)
			var l Ladder
			l.Arrangement = DirectReturn
			for k := range nb {
				id := bt.Net.LinkID(bt.Branch[fmt.Sprintf("b%d", k)])
				l.Branches = append(l.Branches, Branch{ID: id, Elements: bt.Net.Elements(bt.Branch[id]),
					Supply: bt.Net.Elements(bt.Branch[id] - 2), Return: bt.Net.Elements(bt.Branch[id] - 1)})
			}
			src := Source{Pump: bt.Net.Elements(bt.PumpLink)[0], Static: 1.5e5}
			b.ReportAllocs()
			cpu := cpuclock.Start()
			for b.Loop() {
				if _, err := Build(l, src, water20); err != nil {
					b.Fatal(err)
				}
			}
			cpu.Report(b)
		})
	}
}
