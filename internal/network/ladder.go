package network

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
)

// Arrangement is how a ladder's branches are connected to the source.
type Arrangement int

// Arrangements of a ladder.
const (
	// NoHeaderLoss: ideal headers, every branch sees the same differential
	// (the textbook parallel case). Header segments are ignored.
	NoHeaderLoss Arrangement = iota
	// DirectReturn: supply and return headers both start at the source; the
	// first branch supplied is the first returned, so near branches see a
	// higher differential than far ones.
	DirectReturn
	// ReverseReturn: the return header starts at the first branch and runs
	// in the same direction as the supply header, then back to the source,
	// so the first branch supplied is the last returned and all water paths
	// are about equally long.
	ReverseReturn
)

// String returns the trade name of the arrangement.
func (a Arrangement) String() string {
	switch a {
	case NoHeaderLoss:
		return "no header loss"
	case DirectReturn:
		return "direct return"
	case ReverseReturn:
		return "reverse return"
	}
	return fmt.Sprintf("arrangement(%d)", int(a))
}

// Branch is one parallel circuit of a ladder.
type Branch struct {
	ID string
	// Elements are the branch's own parts in series (terminal, valves,
	// pipes). With Sub set they are the riser's parts and may be empty.
	Elements []hydraulics.Element
	// Supply and Return are the header segments between the previous
	// take-off (the source for the first branch) and this branch's take-off.
	// In ReverseReturn the return header begins at the first branch, so the
	// first branch's Return holds instead the return leg from the last
	// take-off back to the source. An empty segment joins the two take-offs
	// directly. Ignored for NoHeaderLoss.
	Supply, Return []hydraulics.Element
	// Sub, when set, makes the branch a riser feeding its own ladder, which
	// hangs between the riser top and this branch's return take-off.
	Sub *Ladder
	// Control, with Sub, is a differential controller's valve in the
	// riser's return (hydraulics.DiffController): the sub-ladder then hangs
	// between the riser top and the node "<ID>.controlled", and the link
	// "<ID>.controller" joins that node to the return take-off. The span
	// the controller holds is the riser's supply take-off to the
	// controlled node: the riser's own parts (its partner valve) and the
	// sub-ladder. Nil: no controller.
	Control hydraulics.Element
	// ControlBelow makes the controller sense across the sub-ladder alone
	// (from the riser top), its riser's own parts outside the span.
	ControlBelow bool
}

// Ladder is a set of branches taking off a pair of headers, in take-off
// order from the source.
type Ladder struct {
	Arrangement Arrangement
	Branches    []Branch
}

// Source drives a ladder: a pump, or a constant differential held between
// the supply and return connections.
type Source struct {
	Pump         hydraulics.Element   // nil: constant Differential
	Differential float64              // Pa, used when Pump is nil; must be positive
	Main         []hydraulics.Element // common main (flow and return) in series with the source
	Static       float64              // Pa held at the pressurisation point (pump suction, or the return connection); 0 gives gauge pressures
	// Lift is the static head of an open circuit, Pa: what the source must
	// give before any water moves (the rise from the free surface it draws
	// from to the open outlet, and the outlet's required pressure). It sits
	// in series with the pump, or is taken from Differential; 0 for a
	// closed loop.
	Lift float64
}

// PumpElements returns the elements of the pump link: the pump and, in an
// open circuit, the static lift it works against.
func (s Source) PumpElements() []hydraulics.Element {
	if s.Lift != 0 {
		return []hydraulics.Element{s.Pump, hydraulics.StaticHead{Pressure: s.Lift}}
	}
	return []hydraulics.Element{s.Pump}
}

// Held returns the differential a source without a pump holds across the
// circuit's friction: Differential less the static lift.
func (s Source) Held() float64 { return s.Differential - s.Lift }

// Built is a network made by Build, with the indices a caller needs to read
// its solution.
type Built struct {
	Net *Network
	// Branch maps a branch ID to its link: the terminal link, or a riser's
	// own link (-1 for a riser without elements).
	Branch map[string]int
	// SupplyNode and ReturnNode map a branch ID to its take-off nodes.
	SupplyNode, ReturnNode map[string]int
	PumpLink               int   // -1 without a pump
	MainLink               int   // -1 without a main
	Headers                []int // header segment links
	// Controller maps the ID of a riser with a differential controller to
	// the controller's link; the link's from node closes the span the
	// controller holds (see Branch.Control). Nil when there is none.
	Controller map[string]int
	// senseFrom maps such a riser to the node its controller's span
	// starts at.
	senseFrom map[string]int
}

// ControlledDiff returns the differential across the span riser id's
// controller holds in solution sol: from the riser's supply take-off (the
// riser top with ControlBelow) to the controller's inlet, Pa. ok is false
// when the riser has no controller.
func (b *Built) ControlledDiff(id string, sol *Solution) (dp float64, ok bool) {
	l, ok := b.Controller[id]
	if !ok {
		return 0, false
	}
	from, _ := b.Net.LinkEnds(l)
	return sol.Pressure[b.senseFrom[id]] - sol.Pressure[from], true
}

// Node and link IDs made by Build.
const (
	// ReturnID is the node at the pump suction, or the return connection
	// of a constant-differential source: the pressurisation point.
	ReturnID = "return"
	// SupplyID is the supply connection of a constant-differential source.
	SupplyID = "supply"
	// PumpOutletID is the pump's discharge node.
	PumpOutletID = "pump outlet"
	// MainOutletID is the node where the common main meets the ladder.
	MainOutletID = "main outlet"
	// PumpID and MainID are the links of the pump and the common main.
	PumpID = "pump"
	MainID = "main"
)

// Build makes the network of a ladder driven by a source. Branch k's nodes
// are "<ID>.supply" and "<ID>.return", its header segments the links
// "<ID>.supply-header" and "<ID>.return-header", a riser's top node
// "<ID>.riser". Nodes are added in take-off order, supply and return
// interleaved, so the node matrix has a small bandwidth.
func Build(l Ladder, src Source, f fluid.State) (*Built, error) {
	// Size the maps and slices for the whole tree at once: growing maps of
	// tens of thousands of IDs cost more than solving the network.
	nb := countBranches(&l, map[*Ladder]bool{})
	net := New(f)
	net.nodeIndex = make(map[string]int, 3*nb+3)
	net.linkIndex = make(map[string]int, 3*nb+2)
	net.nodeID = make([]string, 0, 3*nb+3)
	net.fixed = make([]bool, 0, 3*nb+3)
	net.pfix = make([]float64, 0, 3*nb+3)
	net.demand = make([]float64, 0, 3*nb+3)
	net.links = make([]link, 0, 3*nb+2)
	b := &builder{
		net: net,
		out: &Built{
			Branch:     make(map[string]int, nb),
			SupplyNode: make(map[string]int, nb),
			ReturnNode: make(map[string]int, nb),
			PumpLink:   -1,
			MainLink:   -1,
			Headers:    make([]int, 0, 2*nb),
		},
		path: map[*Ladder]bool{},
	}
	b.out.Net = b.net
	if !finite(src.Static) {
		return nil, fmt.Errorf("build: static pressure %g: %w", src.Static, ErrInput)
	}
	if !(src.Lift >= 0) || math.IsInf(src.Lift, 1) {
		return nil, fmt.Errorf("build: static lift %g Pa must be zero or positive: %w", src.Lift, ErrInput)
	}
	ret := b.net.addNode(ReturnID)
	b.net.FixPressure(ret, src.Static)
	var sup int
	if src.Pump != nil {
		sup = b.net.addNode(PumpOutletID)
		b.out.PumpLink = b.net.addLink(PumpID, ret, sup, src.PumpElements())
	} else {
		if !(src.Differential > 0) || math.IsInf(src.Differential, 1) {
			return nil, fmt.Errorf("build: source differential %g Pa must be positive without a pump: %w", src.Differential, ErrInput)
		}
		if !(src.Held() > 0) {
			return nil, fmt.Errorf("build: source differential %g Pa does not exceed the static lift %g Pa: no flow: %w", src.Differential, src.Lift, ErrInput)
		}
		sup = b.net.addNode(SupplyID)
		b.net.FixPressure(sup, src.Static+src.Held())
	}
	if len(src.Main) > 0 {
		top := b.net.addNode(MainOutletID)
		b.out.MainLink = b.net.addLink(MainID, sup, top, b.elems(src.Main))
		sup = top
	}
	if err := b.ladder(&l, sup, ret); err != nil {
		return nil, err
	}
	if b.net.addErr != nil {
		return nil, fmt.Errorf("build: %w", b.net.addErr)
	}
	b.net.invalidate()
	return b.out, nil
}

// countBranches returns the number of branches of l and its sub-ladders,
// each ladder counted once on a path (Build reports a ladder that contains
// itself).
func countBranches(l *Ladder, path map[*Ladder]bool) int {
	if path[l] {
		return 0
	}
	path[l] = true
	defer delete(path, l)
	n := len(l.Branches)
	for i := range l.Branches {
		if sub := l.Branches[i].Sub; sub != nil {
			n += countBranches(sub, path)
		}
	}
	return n
}

type builder struct {
	net  *Network
	out  *Built
	path map[*Ladder]bool     // ladders being built, to catch a Sub that contains itself
	slab []hydraulics.Element // free part of the chunk the links' element lists are cut from
}

// elems returns a copy of es for a link, cut from a shared chunk so a large
// ladder does not allocate once per link.
func (b *builder) elems(es []hydraulics.Element) []hydraulics.Element {
	if len(es) == 0 {
		return nil
	}
	if len(b.slab) < len(es) {
		b.slab = make([]hydraulics.Element, max(len(es), 4096))
	}
	out := b.slab[:len(es):len(es)]
	copy(out, es)
	b.slab = b.slab[len(es):]
	return out
}

func (b *builder) ladder(l *Ladder, sup, ret int) error {
	if b.path[l] {
		return fmt.Errorf("build: a nested ladder contains itself: %w", ErrInput)
	}
	b.path[l] = true
	defer delete(b.path, l)
	nb := len(l.Branches)
	if nb == 0 {
		return fmt.Errorf("build: ladder has no branches: %w", ErrInput)
	}
	for _, br := range l.Branches {
		if br.ID == "" {
			return fmt.Errorf("build: branch with an empty id: %w", ErrInput)
		}
		before := len(b.out.Branch)
		if b.out.Branch[br.ID] = -1; len(b.out.Branch) == before {
			return fmt.Errorf("build: duplicate branch id %q: %w", br.ID, ErrInput)
		}
	}
	header := func(id string, from, to int, elems []hydraulics.Element) {
		b.out.Headers = append(b.out.Headers, b.net.addLink(id, from, to, b.elems(elems)))
	}
	switch l.Arrangement {
	case NoHeaderLoss:
		for _, br := range l.Branches {
			if err := b.branch(br, sup, ret); err != nil {
				return err
			}
		}
	case DirectReturn:
		ps, pr := sup, ret
		for _, br := range l.Branches {
			s, r := ps, pr
			if len(br.Supply) > 0 {
				s = b.net.addNode(br.ID + ".supply")
				header(br.ID+".supply-header", ps, s, br.Supply)
			}
			if len(br.Return) > 0 {
				r = b.net.addNode(br.ID + ".return")
				header(br.ID+".return-header", r, pr, br.Return)
			}
			if err := b.branch(br, s, r); err != nil {
				return err
			}
			ps, pr = s, r
		}
	case ReverseReturn:
		// Return take-off k is its own node unless its segment from k-1
		// is empty; with an empty return leg the last group is the source's
		// return node.
		group := make([]int, nb)
		for k := 1; k < nb; k++ {
			group[k] = k
			if len(l.Branches[k].Return) == 0 {
				group[k] = group[k-1]
			}
		}
		legEmpty := len(l.Branches[0].Return) == 0
		rn := make([]int, nb)
		ps := sup
		for k, br := range l.Branches {
			s := ps
			if len(br.Supply) > 0 {
				s = b.net.addNode(br.ID + ".supply")
				header(br.ID+".supply-header", ps, s, br.Supply)
			}
			switch {
			case legEmpty && group[k] == group[nb-1]:
				rn[k] = ret
			case group[k] == k:
				rn[k] = b.net.addNode(br.ID + ".return")
			default:
				rn[k] = rn[k-1]
			}
			if k > 0 && len(br.Return) > 0 {
				header(br.ID+".return-header", rn[k-1], rn[k], br.Return)
			}
			if err := b.branch(br, s, rn[k]); err != nil {
				return err
			}
			ps = s
		}
		if !legEmpty {
			header(l.Branches[0].ID+".return-header", rn[nb-1], ret, l.Branches[0].Return)
		}
	default:
		return fmt.Errorf("build: unknown arrangement %d: %w", int(l.Arrangement), ErrInput)
	}
	return nil
}

func (b *builder) branch(br Branch, s, r int) error {
	b.out.SupplyNode[br.ID] = s
	b.out.ReturnNode[br.ID] = r
	if br.Sub == nil {
		if br.Control != nil {
			return fmt.Errorf("build: branch %q has a differential controller but no sub-ladder to hold: %w", br.ID, ErrInput)
		}
		if len(br.Elements) == 0 {
			return fmt.Errorf("build: branch %q has no elements and no sub-ladder: %w", br.ID, ErrInput)
		}
		b.out.Branch[br.ID] = b.net.addLink(br.ID, s, r, b.elems(br.Elements))
		return nil
	}
	top := s
	if len(br.Elements) > 0 {
		top = b.net.addNode(br.ID + ".riser")
		b.out.Branch[br.ID] = b.net.addLink(br.ID, s, top, b.elems(br.Elements))
	}
	if br.Control != nil {
		// The controller sits in the riser's return, after the sub-ladder.
		in := b.net.addNode(br.ID + ".controlled")
		if b.out.Controller == nil {
			b.out.Controller, b.out.senseFrom = map[string]int{}, map[string]int{}
		}
		b.out.Controller[br.ID] = b.net.addLink(br.ID+".controller", in, r, []hydraulics.Element{br.Control})
		b.out.senseFrom[br.ID] = s
		if br.ControlBelow {
			b.out.senseFrom[br.ID] = top
		}
		r = in
	}
	return b.ladder(br.Sub, top, r)
}
