package balance

import (
	"fmt"
	"math"
	"math/rand/v2"

	"flowset/internal/parallel"
	"flowset/internal/plant"
)

// ParamKind names the kind of an uncertain multiplier of the calibration.
type ParamKind int

// Kinds of uncertain multipliers (see Uncertainty).
const (
	ResistanceParam ParamKind = iota // a branch's resistance multiplier
	KvParam                          // a branch valve's Kv scale
	HeaderParam                      // the header multiplier
	PumpParam                        // the pump head multiplier
)

// uparam is one uncertain multiplier: its kind, its branch (model index;
// -1 for the header and pump) and the sd of its logarithm.
type uparam struct {
	kind   ParamKind
	branch int
	sigma  float64
}

// sensitivities calls f once per uncertain parameter of u with the change
// of every branch's ln q (by model index) per unit change of the
// parameter's logarithm, at the solution sol of model m with multipliers
// p: the implicit-function sensitivities of the solve, one O(n) solve per
// parameter on a ladder's narrow band. For a multiplier θ on a link's drop,
// ∂Δp/∂ln θ is the drop it scales (the fixed parts for a resistance
// multiplier, all header segments for the header multiplier, the pump's
// negative drop for its head multiplier) and -2 Δp_valve for a Kv scale
// (Δp ∝ Kv⁻²). dlnq is reused between calls.
//
// The solves are independent: up to workers of them (0:
// runtime.GOMAXPROCS(0)) run side by side, each with its own scratch, a
// chunk of parameters at a time, and f is called on this goroutine in
// the parameters' order, so its results do not depend on the workers.
func sensitivities(m *plant.Model, p plant.Params, u *Uncertainty, sol *plant.Solved, workers int, f func(par uparam, dlnq []float64) error) error {
	n := len(m.Branches)
	nl := sol.Built.Net.NumLinks()
	// Each branch's link and flow, looked up once: this loop runs once per
	// uncertain parameter, and a map lookup per branch in it cost more than
	// the sensitivity solve on large sites.
	link := make([]int, n)
	flow := make([]float64, n)
	for i := range n {
		link[i] = sol.Built.Branch[m.Branches[i].ID]
		flow[i] = sol.Flow(i)
	}
	// Every parameter with the drop changes it makes (one link's, or the
	// header segments').
	type sens struct {
		par   uparam
		links []int
		dh    []float64
	}
	var all []sens
	for j := range n {
		l := link[j]
		if l < 0 {
			continue
		}
		if j < len(u.LnResistance) && u.LnResistance[j] > 0 {
			if fe := m.FixedElement(j, p.Resistance[j]); fe != nil {
				d, _ := fe.Drop(sol.Flow(j), m.Fluid)
				all = append(all, sens{uparam{ResistanceParam, j, u.LnResistance[j]}, []int{l}, []float64{d}})
			}
		}
		if j < len(u.LnKvScale) && u.LnKvScale[j] > 0 && m.Branches[j].Valve != nil {
			all = append(all, sens{uparam{KvParam, j, u.LnKvScale[j]}, []int{l}, []float64{-2 * sol.ValveDiff(j)}})
		}
	}
	if u.LnHeader > 0 && len(sol.Built.Headers) > 0 {
		h := sens{par: uparam{HeaderParam, -1, u.LnHeader}}
		for _, l := range sol.Built.Headers {
			h.links, h.dh = append(h.links, l), append(h.dh, sol.Sol.Drop[l])
		}
		all = append(all, h)
	}
	if u.LnPumpHead > 0 && sol.Built.PumpLink >= 0 {
		// The pump's own drop: the static lift in its link does not
		// scale with the head multiplier.
		l := sol.Built.PumpLink
		all = append(all, sens{uparam{PumpParam, -1, u.LnPumpHead}, []int{l}, []float64{sol.Sol.Drop[l] - m.Lift()}})
	}
	// The solves go four at a time (network.Solution.SensitivitiesAt,
	// each the same to the bit as one alone), flow changes only at the
	// branches' links, the only ones flowDelta reads.
	const group = 4
	var at []int
	for _, l := range link {
		if l >= 0 {
			at = append(at, l)
		}
	}
	tasks := (len(all) + group - 1) / group
	workers = max(1, min(parallel.Workers(workers), tasks))
	// Scratch per worker, and a chunk's results: a few columns a worker,
	// so the memory stays a small multiple of the branches.
	type scratch struct{ dh, dq, nodes [][]float64 }
	ws := make([]scratch, workers)
	for w := range ws {
		for range group {
			ws[w].dh = append(ws[w].dh, make([]float64, nl))
			ws[w].dq = append(ws[w].dq, make([]float64, nl))
			ws[w].nodes = append(ws[w].nodes, make([]float64, sol.Built.Net.NumNodes()))
		}
	}
	chunk := group
	if workers > 1 {
		chunk = 16 * workers
	}
	out := make([][]float64, chunk)
	errs := make([]error, chunk/group)
	for k := range out {
		out[k] = make([]float64, n)
	}
	// some works out the sensitivities of ss into dlnq, one each.
	some := func(w *scratch, ss []sens, dlnq [][]float64) error {
		k := len(ss)
		dh, dq, nodes := w.dh[:k], w.dq[:k], w.nodes[:k]
		for j := range ss {
			for i, l := range ss[j].links {
				dh[j][l] = ss[j].dh[i]
			}
		}
		err := sol.Sol.SensitivitiesAt(dh, dq, nodes, at)
		for j := range ss {
			for _, l := range ss[j].links {
				dh[j][l] = 0
			}
		}
		if err != nil {
			return fmt.Errorf("uncertainty band: %w: %w", err, ErrSolve)
		}
		for j := range ss {
			for i := range n {
				dlnq[j][i] = flowDelta(m, link, i, dq[j]) / flow[i]
			}
		}
		return nil
	}
	for lo := 0; lo < len(all); lo += chunk {
		hi := min(lo+chunk, len(all))
		parallel.For(workers, (hi-lo+group-1)/group, func(w, g int) {
			a, b := lo+g*group, min(lo+(g+1)*group, hi)
			errs[g] = some(&ws[w], all[a:b], out[a-lo:b-lo])
		})
		for k := range hi - lo {
			if err := errs[k/group]; err != nil {
				return err
			}
			if err := f(all[lo+k].par, out[k]); err != nil {
				return err
			}
		}
	}
	return nil
}

// bandExactMax is the number of uncertain branch parameters up to which
// flowSD is exact, one sensitivity per parameter (quadratic in the
// branches, but under 0.1 s up to here: sites of about 500 branches, the
// independent test plants among them, keep the exact band); above it,
// flowSDEstimated's linear estimate.
const bandExactMax = 1000

// bandProbes is the number of random probes of flowSDEstimated, and
// bandSeed their fixed seed: the same plan gives the same band.
const (
	bandProbes = 64
	bandSeed   = 0x6c62272e07bb0142
)

// flowSD returns the sd of every branch's ln q (by model index) at sol
// under u, the parameters taken as independent: the square roots of the
// diagonal of J Σ Jᵀ, exact up to bandExactMax uncertain branch
// parameters, estimated above (flowSDEstimated).
func flowSD(m *plant.Model, p plant.Params, u *Uncertainty, sol *plant.Solved) ([]float64, error) {
	return flowSDWith(m, p, u, sol, bandExactMax, 0)
}

// flowSDWith is flowSD exact up to exactMax uncertain branch parameters,
// its sensitivities solved on up to workers goroutines (0: one per
// processor).
func flowSDWith(m *plant.Model, p plant.Params, u *Uncertainty, sol *plant.Solved, exactMax, workers int) ([]float64, error) {
	v := make([]float64, len(m.Branches))
	if u == nil {
		return v, nil
	}
	var err error
	if uncertainBranchParams(m, p, u, sol) <= exactMax {
		err = sensitivities(m, p, u, sol, workers, func(par uparam, dlnq []float64) error {
			for i, d := range dlnq {
				d *= par.sigma
				v[i] += d * d
			}
			return nil
		})
	} else {
		err = flowSDEstimated(m, p, u, sol, v, workers)
	}
	for i := range v {
		v[i] = math.Sqrt(v[i])
	}
	return v, err
}

// uncertainBranchParams counts the parameters sensitivities would take one
// solve each for, the header and pump aside.
func uncertainBranchParams(m *plant.Model, p plant.Params, u *Uncertainty, sol *plant.Solved) int {
	k := 0
	for j := range m.Branches {
		if sol.Built.Branch[m.Branches[j].ID] < 0 {
			continue
		}
		if j < len(u.LnResistance) && u.LnResistance[j] > 0 && m.FixedElement(j, p.Resistance[j]) != nil {
			k++
		}
		if j < len(u.LnKvScale) && u.LnKvScale[j] > 0 && m.Branches[j].Valve != nil {
			k++
		}
	}
	return k
}

// flowSDEstimated sets v to the variance of every branch's ln q in time
// linear in the branches. The header and the pump, which move every
// branch, take one exact sensitivity each. Of the branch parameters, a
// branch's own usually make most of its variance; that part is exact:
// σ² (∂q_i/∂h_i)² (∂Δp/∂ln θ)², from every link's own response
// (network.Solution.OwnSensitivities, one pass over the factor). The rest,
// Σ_{j≠i} σ_j² (∂q_i/∂θ_j)² (the other branches through the headers, a
// riser's terminals for the riser), is estimated without bias by random
// probes (Hutchinson 1990's estimator of a diagonal, here of J Σ Jᵀ): each
// probe moves every branch parameter at once by ±σ_j with random signs,
// one sensitivity solve, and the square of a branch's flow change less its
// own parameters' part has that sum as its mean. With bandProbes probes its
// relative standard error is about √(2/bandProbes) = 18 % (less when a few
// parameters dominate it), on a part that is a small share of most
// branches' variance: on a generated 1,000-branch building the band's
// half-widths are within 3 % of the exact ones at the 95th percentile
// (TestBandEstimated). A riser without parts has no own parameters: its
// whole variance from the branch parameters is probed.
//
// The probes' solves are independent: their signs are drawn in order, then
// up to workers of them (0: runtime.GOMAXPROCS(0)) are solved side by side,
// each with its own scratch, and their squares added in probe order, so
// the band does not depend on the workers.
func flowSDEstimated(m *plant.Model, p plant.Params, u *Uncertainty, sol *plant.Solved, v []float64, workers int) error {
	n := len(m.Branches)
	nl := sol.Built.Net.NumLinks()
	link := make([]int, n)
	flow := make([]float64, n)
	aR, aK := make([]float64, n), make([]float64, n) // σ ∂Δp/∂ln θ of each branch's parameters, Pa
	for j := range n {
		l := sol.Built.Branch[m.Branches[j].ID]
		link[j], flow[j] = l, sol.Flow(j)
		if l < 0 {
			continue
		}
		if j < len(u.LnResistance) && u.LnResistance[j] > 0 {
			if fe := m.FixedElement(j, p.Resistance[j]); fe != nil {
				d, _ := fe.Drop(flow[j], m.Fluid)
				aR[j] = u.LnResistance[j] * d
			}
		}
		if j < len(u.LnKvScale) && u.LnKvScale[j] > 0 && m.Branches[j].Valve != nil {
			aK[j] = u.LnKvScale[j] * -2 * sol.ValveDiff(j)
		}
	}
	dh, dq := make([]float64, nl), make([]float64, nl)
	scratch := make([]float64, sol.Built.Net.NumNodes())
	solve := func() error {
		if err := sol.Sol.SensitivityFlows(dh, dq, scratch); err != nil {
			return fmt.Errorf("uncertainty band: %w: %w", err, ErrSolve)
		}
		clear(dh)
		return nil
	}
	addAll := func() {
		for i := range v {
			d := flowDelta(m, link, i, dq) / flow[i]
			v[i] += d * d
		}
	}
	if u.LnHeader > 0 && len(sol.Built.Headers) > 0 {
		for _, l := range sol.Built.Headers {
			dh[l] = u.LnHeader * sol.Sol.Drop[l]
		}
		if err := solve(); err != nil {
			return err
		}
		addAll()
	}
	if u.LnPumpHead > 0 && sol.Built.PumpLink >= 0 {
		dh[sol.Built.PumpLink] = u.LnPumpHead * (sol.Sol.Drop[sol.Built.PumpLink] - m.Lift())
		if err := solve(); err != nil {
			return err
		}
		addAll()
	}
	own := make([]float64, nl)
	if err := sol.Sol.OwnSensitivities(own); err != nil {
		return fmt.Errorf("uncertainty band: %w: %w", err, ErrSolve)
	}
	rest := make([]float64, n)
	rng := rand.New(rand.NewPCG(bandSeed, 1))
	sign := func(a float64) float64 {
		if rng.Uint64()&1 == 1 {
			return -a
		}
		return a
	}
	workers = max(1, min(parallel.Workers(workers), bandProbes))
	chunk := 1
	if workers > 1 {
		chunk = 4 * workers
	}
	// Per probe of a chunk: each branch's own drop change (step) and its
	// flow change less its own parameters' part (d); per worker, the
	// solve's scratch.
	step, d := make([][]float64, chunk), make([][]float64, chunk)
	for k := range chunk {
		step[k], d[k] = make([]float64, n), make([]float64, n)
	}
	type probeScratch struct{ dh, dq, nodes []float64 }
	ws := make([]probeScratch, workers)
	for w := range ws {
		ws[w] = probeScratch{make([]float64, nl), make([]float64, nl), make([]float64, sol.Built.Net.NumNodes())}
	}
	errs := make([]error, chunk)
	for lo := 0; lo < bandProbes; lo += chunk {
		hi := min(lo+chunk, bandProbes)
		for k := range hi - lo {
			for j, l := range link {
				if l >= 0 {
					step[k][j] = sign(aR[j]) + sign(aK[j])
				}
			}
		}
		parallel.For(workers, hi-lo, func(w, k int) {
			sc := &ws[w]
			for j, l := range link {
				if l >= 0 {
					sc.dh[l] = step[k][j]
				}
			}
			err := sol.Sol.SensitivityFlows(sc.dh, sc.dq, sc.nodes)
			clear(sc.dh)
			if err != nil {
				errs[k] = fmt.Errorf("uncertainty band: %w: %w", err, ErrSolve)
				return
			}
			errs[k] = nil
			for i, l := range link {
				di := flowDelta(m, link, i, sc.dq)
				if l >= 0 {
					di -= own[l] * step[k][i]
				}
				d[k][i] = di
			}
		})
		for k := range hi - lo {
			if errs[k] != nil {
				return errs[k]
			}
			for i, di := range d[k] {
				rest[i] += di * di
			}
		}
	}
	for i, l := range link {
		var o float64
		if l >= 0 {
			o = own[l] * own[l] * (aR[i]*aR[i] + aK[i]*aK[i])
		}
		v[i] += (o + rest[i]/bandProbes) / (flow[i] * flow[i])
	}
	return nil
}

// flowDelta is branch i's share of the link flow changes dq: its link's, or
// a riser without parts' children's summed, as plant.Solved.Flow does
// (link holds each branch's link, -1 for a riser without parts).
func flowDelta(m *plant.Model, link []int, i int, dq []float64) float64 {
	if l := link[i]; l >= 0 {
		return dq[l]
	}
	var s float64
	for _, c := range m.Branches[i].Children {
		s += flowDelta(m, link, c, dq)
	}
	return s
}
