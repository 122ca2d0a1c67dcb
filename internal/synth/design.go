package synth

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
	"flowset/internal/network"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// Design rules of the generator. None is a standard: they are common
// practice for heating and cooling circuits (from memory, no source), chosen
// so the sites look like real ones.
const (
	maxBranchVelocity = 1.2   // m/s in a terminal's copper or steel pipe
	maxBranchGradient = 300.0 // Pa/m in a terminal's pipe
	maxHeaderVelocity = 1.5   // m/s in a header or riser
	maxHeaderGradient = 250.0 // Pa/m, the upper end of the usual 100-250 Pa/m
	minHeaderGradient = 20.0  // Pa/m, floor for very large sites
	headerBudget      = 100e3 // Pa along supply and return, before the gradient floor
	valveOpenDrop     = 8e3   // Pa: the largest drop of a fully open valve at design flow
	pumpMargin        = 1.15  // head (or set point) over the index circuit's need
	copperBelow       = 0.5e-3
	maxTotalFlow      = 3.0 // m3/s: larger sites have their flows scaled down to stay inside the sheets' limits
)

// valveSize is one size of the invented regulating-valve family.
type valveSize struct {
	name  string
	kvs   float64 // m3/h at 1 bar, fully open
	turns float64 // handwheel turns, closed to open
}

// valveFamily is the generator's range of regulating valves. The Kvs are
// typical of line-sized balancing valves (from memory, no source); the
// names are invented.
func valveFamily() []valveSize {
	return []valveSize{
		{"V15", 2.5, 4}, {"V20", 5.6, 4}, {"V25", 9.0, 4}, {"V32", 15.5, 4}, {"V40", 24, 4},
		{"V50", 39, 4}, {"V65", 85, 8}, {"V80", 120, 8}, {"V100", 190, 8}, {"V125", 300, 8}, {"V150", 420, 8},
	}
}

// heldSize is one pressure-independent valve of the generator's family.
type heldSize struct {
	name       string
	qmax, hold float64 // largest flow held, m3/s; hold differential, Pa
}

// heldFamily is the generator's range of pressure-independent valves: the
// largest flows and hold differentials are typical of terminal valves of
// the kind (from memory, no source); the names are invented.
func heldFamily() []heldSize {
	return []heldSize{{"P15", 0.15e-3, 20e3}, {"P20", 0.4e-3, 20e3}, {"P25", 0.9e-3, 25e3}, {"P32", 1.8e-3, 25e3},
		{"P40", 3.5e-3, 30e3}, {"P50", 6e-3, 30e3}}
}

// heldTable is an invented table: settings 1 to 10 in steps of 0.1, the
// flow held a tenth of the largest a setting, the Kv below the hold
// differential left for the model to derive.
func heldTable(h heldSize) site.ValveModel {
	vm := site.ValveModel{Name: h.name, Unit: "steps", Step: 0.1, MinDiff: 3e3, HoldDiff: h.hold, Rangeability: math.NaN(), Kvs: math.NaN()}
	for s := 1.0; s <= 10; s++ {
		vm.Settings = append(vm.Settings, s)
		vm.MaxFlow = append(vm.MaxFlow, h.qmax*s/10)
		vm.Kv = append(vm.Kv, math.NaN())
	}
	return vm
}

// held puts Spec.Held of the terminal branches, drawn at random, on the
// smallest pressure-independent valve whose largest flow is 1.25 times
// their design flow or more.
func (d *designer) held() {
	fam := heldFamily()
	used := make([]bool, len(fam))
	leaves := append([]int(nil), d.leaves...)
	d.rng.Shuffle(len(leaves), func(a, b int) { leaves[a], leaves[b] = leaves[b], leaves[a] })
	for _, i := range leaves[:int(math.Round(d.spec.Held*float64(len(leaves))))] {
		b := &d.s.Branches[i]
		k := len(fam) - 1
		for j, h := range fam {
			if h.qmax >= 1.25*b.DesignFlow {
				k = j
				break
			}
		}
		b.Valve = fam[k].name
		used[k] = true
	}
	for j, h := range fam {
		if used[j] {
			d.s.Valves = append(d.s.Valves, heldTable(h))
		}
	}
}

// valveTable is an invented handwheel table shaped like real ones: eight
// points from an eighth of the travel to fully open, ln Kv close to linear in
// turns at first and flattening towards open, Kv(x) = Kvs·φ0^((1-x)^1.3)
// with x the fraction of the turns and φ0 = 0.03, to three significant
// figures. The shape is an invention, not any maker's curve.
func valveTable(v valveSize) site.ValveModel {
	vm := site.ValveModel{Name: v.name, Unit: "turns", Step: 0.1, MinDiff: 3e3, Rangeability: math.NaN(), Kvs: math.NaN()}
	for k := 1; k <= 8; k++ {
		s := v.turns * float64(k) / 8
		x := s / v.turns
		vm.Settings = append(vm.Settings, s)
		vm.Kv = append(vm.Kv, sigFigs(v.kvs*math.Pow(0.03, math.Pow(1-x, 1.3)), 3))
	}
	return vm
}

// pipeChoice is a catalogue size with its bore.
type pipeChoice struct {
	standard, size string
	bore, rough    float64
}

func catalogue(standard string, names ...string) []pipeChoice {
	var out []pipeChoice
	for _, n := range names {
		ps, err := hydraulics.LookupPipe(standard, n)
		if err != nil {
			continue // not reached: the names are the catalogue's
		}
		out = append(out, pipeChoice{standard, n, ps.Bore, ps.Roughness})
	}
	return out
}

func copperSizes() []pipeChoice {
	return catalogue("en1057", "15x0.7", "22x0.9", "28x0.9", "35x1.2", "42x1.2", "54x1.2")
}

func steelSizes() []pipeChoice {
	return catalogue("en10255-m", "DN15", "DN20", "DN25", "DN32", "DN40", "DN50", "DN65", "DN80", "DN100", "DN125", "DN150")
}

func headerSizes() []pipeChoice {
	return append(steelSizes(), catalogue("sch40", "DN200", "DN250", "DN300")...)
}

func velocity(q, bore float64) float64 { return q / (math.Pi * bore * bore / 4) }

// pickPipe returns the smallest size whose velocity at q is at most vmax
// and friction gradient at most g, else the largest.
func pickPipe(sizes []pipeChoice, q, vmax, g float64, f fluid.State) pipeChoice {
	for _, p := range sizes {
		if velocity(q, p.bore) <= vmax && gradient(p.bore, p.rough, q, f) <= g {
			return p
		}
	}
	return sizes[len(sizes)-1]
}

// gradient is the friction gradient, Pa/m, of clean pipe of the standard's
// material at flow q.
func gradient(bore, rough, q float64, f fluid.State) float64 {
	dp, _ := hydraulics.Pipe{Bore: bore, Length: 1, Roughness: rough}.Drop(q, f)
	return dp
}

// pickHeader returns the smallest header size meeting the velocity and
// gradient limits; past the catalogue, a bore (in whole mm) that meets them.
func pickHeader(sizes []pipeChoice, q, g float64, f fluid.State) pipeChoice {
	for _, p := range sizes {
		if velocity(q, p.bore) <= maxHeaderVelocity && gradient(p.bore, p.rough, q, f) <= g {
			return p
		}
	}
	lo, hi := 0.3, 3.0
	rough := sizes[len(sizes)-1].rough
	for range 60 {
		mid := (lo + hi) / 2
		if velocity(q, mid) <= maxHeaderVelocity && gradient(mid, rough, q, f) <= g {
			hi = mid
		} else {
			lo = mid
		}
	}
	return pipeChoice{standard: sizes[len(sizes)-1].standard, bore: math.Min(3, math.Ceil(hi*1000)/1000), rough: rough}
}

// node is one entry of a ladder while the site is designed.
type node struct {
	branch   int // row in the branches sheet
	children []int
}

// designer draws a site.
type designer struct {
	spec Spec
	rng  *rand.Rand
	fl   fluid.State
	s    *site.Site
	top  []node
	// leaves are the rows of terminal branches, in sheet order.
	leaves []int
	// units are the building terminals drawn (Spec.RiserTerminals), by
	// leaf.
	units []unitDraw
	// The pipe catalogue's sizes the designer picks from.
	copper, steel, header []pipeChoice
}

// layout draws the rows: terminals and, with Spec.Nested, risers with 3-6
// sub-branches, in take-off order.
func (d *designer) layout() {
	n := d.spec.Branches
	nan := math.NaN()
	row := func(id, parent string) int {
		d.s.Branches = append(d.s.Branches, site.Branch{ID: id, Parent: parent, PipeBore: nan, Roughness: nan,
			TerminalFlow: nan, Setting: nan, HeaderBore: nan})
		return len(d.s.Branches) - 1
	}
	for pos := 1; len(d.s.Branches) < n; pos++ {
		left := n - len(d.s.Branches)
		if rt := d.spec.RiserTerminals; rt > 0 && left >= 4 {
			k := int(math.Round(float64(rt) * (0.8 + 0.4*d.rng.Float64())))
			k = min(max(k, 3), left-1)
			if left-1-k < 4 {
				k = left - 1 // no stub riser at the end
			}
			id := fmt.Sprintf("R%d", pos)
			nd := node{branch: row(id, "")}
			for c := 1; c <= k; c++ {
				nd.children = append(nd.children, row(fmt.Sprintf("%s.%d", id, c), id))
			}
			d.leaves = append(d.leaves, nd.children...)
			d.top = append(d.top, nd)
			continue
		}
		if d.spec.Nested && left >= 4 && d.rng.Float64() < 0.25 {
			k := min(3+d.rng.IntN(4), left-1)
			id := fmt.Sprintf("R%d", pos)
			nd := node{branch: row(id, "")}
			for c := 1; c <= k; c++ {
				nd.children = append(nd.children, row(fmt.Sprintf("%s.%d", id, c), id))
			}
			d.leaves = append(d.leaves, nd.children...)
			d.top = append(d.top, nd)
			continue
		}
		nd := node{branch: row(fmt.Sprintf("T%d", pos), "")}
		d.leaves = append(d.leaves, nd.branch)
		d.top = append(d.top, nd)
	}
}

// terminals draws each terminal's design flow, pipe, terminal and fittings.
func (d *designer) terminals() {
	flows := make([]float64, len(d.leaves))
	var total float64
	for k := range d.leaves {
		if d.spec.RiserTerminals > 0 {
			flows[k] = d.unit(k).flow
		} else {
			// Log-uniform over 0.05-3 l/s, to 0.01 l/s.
			q := math.Exp(math.Log(0.05e-3) + d.rng.Float64()*math.Log(3/0.05))
			flows[k] = math.Max(0.05e-3, math.Round(q*1e5)/1e5)
		}
		total += flows[k]
	}
	scale := 1.0
	if total > maxTotalFlow {
		scale = maxTotalFlow / total
	}
	for k, i := range d.leaves {
		b := &d.s.Branches[i]
		b.DesignFlow = flows[k] * scale
		sizes := d.steel
		if b.DesignFlow < copperBelow {
			sizes = d.copper
		}
		p := pickPipe(sizes, b.DesignFlow, maxBranchVelocity, maxBranchGradient, d.fl)
		b.PipeStandard, b.PipeSize = p.standard, p.size
		b.PipeLength = math.Round(10 + 50*d.rng.Float64())
		b.FittingsK = math.Round(4 + 8*d.rng.Float64())
		b.TerminalDrop = math.Round(20+60*d.rng.Float64()) * 500 // 10-40 kPa in 0.5 kPa
		if d.spec.RiserTerminals > 0 {
			u := d.units[k]
			b.TerminalDrop = math.Round(u.drop/500) * 500
			b.Note = u.kind
		}
		if d.rng.Float64() < 0.3 {
			// A two-port control valve held open, sized for about 15 kPa.
			b.ControlKvs = sigFigs(b.DesignFlow*3600/math.Sqrt(0.15), 2)
		}
	}
}

// unitDraw is one building terminal drawn by unit.
type unitDraw struct {
	kind       string
	flow, drop float64 // m3/s, Pa
}

// unit draws the k-th terminal of a building (Spec.RiserTerminals): its kind,
// design flow (to 0.01 l/s) and terminal drop, and keeps it in d.units.
func (d *designer) unit(k int) unitDraw {
	logU := func(lo, hi float64) float64 { return math.Exp(math.Log(lo) + d.rng.Float64()*math.Log(hi/lo)) }
	var u unitDraw
	switch x := d.rng.Float64(); {
	case x < 0.6:
		u = unitDraw{"radiator", logU(0.05e-3, 0.2e-3), logU(5e3, 15e3)}
	case x < 0.96:
		u = unitDraw{"fan coil", logU(0.1e-3, 0.5e-3), logU(15e3, 30e3)}
	default:
		u = unitDraw{"air-handler coil", logU(1e-3, 4e-3), logU(20e3, 40e3)}
	}
	u.flow = math.Max(0.01e-3, math.Round(u.flow*1e5)/1e5)
	if len(d.units) <= k {
		d.units = append(d.units, make([]unitDraw, k+1-len(d.units))...)
	}
	d.units[k] = u
	return u
}

// risers gives each riser its flow, pipe and the header segments of its
// sub-branches (one floor each).
func (d *designer) risers(g float64) {
	for _, nd := range d.top {
		if len(nd.children) == 0 {
			continue
		}
		b := &d.s.Branches[nd.branch]
		for _, c := range nd.children {
			b.DesignFlow += d.s.Branches[c].DesignFlow
		}
		p := pickPipe(d.steel, b.DesignFlow, maxHeaderVelocity, g, d.fl)
		b.PipeStandard, b.PipeSize = p.standard, p.size
		b.PipeLength = math.Round(10 + 30*d.rng.Float64())
		b.FittingsK = 5
		b.Note = fmt.Sprintf("riser to %d sub-branches", len(nd.children))
		d.headers(nd.children, g, true)
	}
}

// headers sizes the header segments of one ladder for the flows they carry
// in its arrangement.
func (d *designer) headers(rows []int, g float64, riser bool) {
	if d.s.Header == site.NoHeaderLoss {
		return
	}
	n := len(rows)
	q := make([]float64, n)
	for k, i := range rows {
		q[k] = d.s.Branches[i].DesignFlow
	}
	for k, i := range rows {
		b := &d.s.Branches[i]
		var sup, ret float64 // flows in this row's supply and return segments
		for j := k; j < n; j++ {
			sup += q[j]
		}
		ret = sup
		if d.s.Header == site.ReverseReturn {
			ret = 0
			for j := range k {
				ret += q[j]
			}
			if k == 0 {
				ret = sup // the return leg to the source carries everything
			}
		}
		p := pickHeader(d.header, math.Max(sup, ret), g, d.fl)
		b.HeaderStandard, b.HeaderSize = p.standard, p.size
		b.HeaderBore = math.NaN()
		if p.size == "" {
			b.HeaderBore = p.bore
		}
		b.HeaderK = 1 // a tee run-through and a bend or two, common practice
		switch {
		case riser:
			b.SupplyLength = 3.5 // one floor
		case k == 0:
			b.SupplyLength = math.Round(5 + 15*d.rng.Float64())
		case len(d.top) > 200:
			b.SupplyLength = math.Round(2*(1+3*d.rng.Float64())) / 2
		default:
			b.SupplyLength = math.Round(3 + 9*d.rng.Float64())
		}
		b.ReturnLength = b.SupplyLength
		if d.s.Header == site.ReverseReturn && k == 0 {
			// The return leg runs back from the far end.
			var run float64
			for _, j := range rows {
				run += d.s.Branches[j].SupplyLength
			}
			b.ReturnLength = run
		}
	}
}

// valves gives every branch the smallest valve of the family whose fully
// open drop at design flow is at most valveOpenDrop, and returns the models
// used, smallest first.
func (d *designer) valves() []site.ValveModel {
	fam := valveFamily()
	used := make([]bool, len(fam))
	for i := range d.s.Branches {
		b := &d.s.Branches[i]
		k := len(fam) - 1
		for j, v := range fam {
			if dp, _ := hydraulics.KvDrop(b.DesignFlow, v.kvs, d.fl.Density); dp <= valveOpenDrop {
				k = j
				break
			}
		}
		b.Valve = fam[k].name
		used[k] = true
	}
	var out []site.ValveModel
	for j, v := range fam {
		if used[j] {
			out = append(out, valveTable(v))
		}
	}
	return out
}

// need returns the differential, Pa, the source must hold for every branch of
// model m to pass its design flow with every valve fully open: the largest
// over the branches of the header path to it plus its own drop (a riser's
// parts plus the need of its sub-ladder).
func need(m *plant.Model) float64 {
	p := m.Design()
	open := m.Open()
	drop := func(es []hydraulics.Element, q float64) float64 {
		var sum float64
		for _, e := range es {
			dp, _ := e.Drop(q, m.Fluid)
			sum += dp
		}
		return sum
	}
	var flow func(i int) float64
	flow = func(i int) float64 {
		b := &m.Branches[i]
		if !b.Riser() {
			return b.Design
		}
		var q float64
		for _, c := range b.Children {
			q += flow(c)
		}
		return q
	}
	var ladder func(ids []int) float64
	ladder = func(ids []int) float64 {
		n := len(ids)
		q := make([]float64, n)
		for k, i := range ids {
			q[k] = flow(i)
		}
		sup := make([]float64, n) // flow in each supply segment
		for k := n - 1; k >= 0; k-- {
			sup[k] = q[k]
			if k+1 < n {
				sup[k] += sup[k+1]
			}
		}
		own := make([]float64, n)
		for k, i := range ids {
			own[k] = drop(m.Elements(i, p, open[i]), q[k])
			if b := &m.Branches[i]; b.PI != nil {
				// Its hold differential with the plan's 10 % margin
				// (balance.HoldMargin), not its open Kv's drop.
				own[k] = 1.1 * b.PI.HoldDiff
				if f := m.FixedElement(i, 1); f != nil {
					own[k] += drop([]hydraulics.Element{f}, q[k])
				}
			}
			if m.Branches[i].Riser() {
				own[k] += ladder(m.Branches[i].Children)
			}
		}
		var worst, sp, rp float64
		for k, i := range ids {
			b := &m.Branches[i]
			var path float64
			switch m.Arrangement {
			case network.DirectReturn: // both headers to the take-off
				sp += drop(b.Supply, sup[k])
				rp += drop(b.Return, sup[k])
				path = sp + rp
			case network.ReverseReturn: // supply to k, then on along the return
				sp += drop(b.Supply, sup[k])
				var back, before float64
				for j := range k + 1 {
					before += q[j]
				}
				for j := k + 1; j < n; j++ {
					back += drop(m.Branches[ids[j]].Return, before)
					before += q[j]
				}
				back += drop(m.Branches[ids[0]].Return, sup[0])
				path = sp + back
			}
			worst = math.Max(worst, own[k]+path)
		}
		return worst
	}
	return ladder(m.Top())
}

// pumpCurve returns five points of an invented pump curve through head
// pumpMargin·hd at flow qd: H = H0 (1 - 0.1 x - b x²), x = q/qd,
// H0 = 1.3·(head at design).
func pumpCurve(qd, hd float64) []site.PumpPoint {
	h0 := 1.3 * hd
	b := 0.9 - hd/h0
	var out []site.PumpPoint
	for _, x := range []float64{0, 0.5, 1, 1.25, 1.5} {
		out = append(out, site.PumpPoint{Flow: x * qd, Head: h0 * (1 - 0.1*x - b*x*x)})
	}
	return out
}

// design draws a site's schedule: layout, terminals, risers, headers, valves,
// then the pump or set point sized on the index circuit.
func (d *designer) design(ctx context.Context) error {
	d.copper, d.steel, d.header = copperSizes(), steelSizes(), headerSizes()
	d.layout()
	d.terminals()
	// The header gradient limit, from the budget over the main headers'
	// length, estimated at 7.5 m a take-off.
	g := math.Max(minHeaderGradient, math.Min(maxHeaderGradient, headerBudget/(2*7.5*float64(len(d.top)))))
	d.risers(g)
	rows := make([]int, len(d.top))
	for k, nd := range d.top {
		rows[k] = nd.branch
	}
	d.headers(rows, g, false)
	d.s.Valves = d.valves()
	if d.spec.Held > 0 {
		d.held()
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	// Size the boundary on a model of the design held at any differential.
	tmp := *d.s
	tmp.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 1, Sensor: site.AtPump}
	tmp.Pump = nil
	m, err := plant.New(&tmp)
	if err != nil {
		return fmt.Errorf("design model: %w", err)
	}
	dp := need(m) * pumpMargin
	if math.IsNaN(dp) || dp <= 0 {
		return fmt.Errorf("design needs a differential of %g Pa: %w", dp, ErrSpec)
	}
	switch d.s.Boundary.Kind {
	case site.PumpCurve:
		var qd float64
		for _, i := range m.Top() {
			qd += d.s.Branches[i].DesignFlow
		}
		d.s.Pump = pumpCurve(qd, dp/(d.fl.Density*hydraulics.StandardGravity))
	case site.ConstantDiff:
		d.s.Boundary.SetPoint = math.Ceil(dp/100) * 100
	default:
		d.s.Boundary.SetPoint = math.NaN()
	}
	return nil
}
