// Package plant turns a site's sheets into a hydraulic model that can be
// solved for any survey state: resistance multipliers on each branch (what the
// calibration fits), valve settings and Kv offsets, a header multiplier and a
// pump head multiplier. It predicts every kind of site reading from a solved
// network and gives the local derivatives the calibration's implicit-function
// Jacobian needs.
package plant

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
	"flowset/internal/network"
	"flowset/internal/site"
)

// ErrModel is wrapped by errors about a site that cannot be modelled.
var ErrModel = errors.New("cannot model site")

// Model is the hydraulic model of a site at its design values.
type Model struct {
	Site        *site.Site
	Fluid       fluid.State
	Arrangement network.Arrangement
	Branches    []Branch
	// Pump is the fitted pump curve at nominal speed; nil when the boundary
	// is a differential. With several pumps it is the first's (the duty
	// pump's), and Pumps holds them all.
	Pump    *hydraulics.PumpCurve
	PumpFit hydraulics.FitReport
	// Pumps are the pump sheet's pumps in its order, each with its fitted
	// curve and its own fixed speed (0: the set's), PumpIDs their ids and
	// PumpFits their fits; one entry for a site of one pump.
	Pumps    []hydraulics.SetMember
	PumpIDs  []string
	PumpFits []hydraulics.FitReport
	// PumpEff are the pumps' efficiency curves (no points where the
	// pump sheet gives none).
	PumpEff []hydraulics.EfficiencyCurve
	// Series is set when the pumps run in series.
	Series bool
	States []State

	index map[string]int
	top   []int // branches on the main headers, in take-off order
	// orderings are the node orderings of the networks built from the
	// model so far, for the next network of the same shape (see Build).
	orderings *network.Orderings
}

// Build builds the network of ladder l (one of the model's) with source src
// in the model's fluid. It shares the orderings of the node matrix with
// the model's other networks (network.Orderings): a job solves a dozen
// networks of the same nodes and links, and on a large building ordering
// them costs as much as a solve.
func (m *Model) Build(l network.Ladder, src network.Source) (*network.Built, error) {
	b, err := network.Build(l, src, m.Fluid)
	if err != nil {
		return nil, err
	}
	b.Net.ShareOrderings(m.orderings)
	return b, nil
}

// Branch is one branch of the model.
type Branch struct {
	ID, Parent string
	Index      int
	Design     float64 // design flow, m3/s
	Target     float64 // flow to balance to, m3/s
	// Fixed are the parts a resistance multiplier scales: pipe, fittings,
	// terminal and any control valve held open.
	Fixed []hydraulics.Element
	// Valve is the balancing valve's characteristic; nil for none (and
	// for a pressure-independent valve).
	Valve hydraulics.Characteristic
	// PI is the branch's pressure-independent control valve; nil for
	// none. A branch has at most one of Valve and PI; its setting is kept
	// where a balancing valve's is (AsFound, State.Settings, a plan's
	// settings) and KvScale multiplies the flow it holds and its Kv.
	PI         *hydraulics.PressureIndependentTable
	ValveModel *site.ValveModel
	AsFound    float64 // as-found setting (fully open when not recorded)
	Recorded   bool    // whether AsFound came from the sheet
	Supply     []hydraulics.Element
	Return     []hydraulics.Element
	Children   []int
	Bore       float64 // branch pipe bore, m (0 when unknown)
	// Controller is a riser's differential controller as the sheets give
	// it (the zero value: none); its set point is the as-found one.
	Controller site.Controller
	// Bypass is a three-port terminal's bypass valve (nil for none),
	// BypassModel its model and BypassAsFound its setting (fully open when
	// not recorded). BypassFixed are the parts that carry the flow through
	// the bypass: Fixed without the terminal. The balancing valve carries
	// it in both positions.
	Bypass        hydraulics.Characteristic
	BypassModel   *site.ValveModel
	BypassAsFound float64
	BypassFixed   []hydraulics.Element
}

// HasValve reports whether the branch has a valve with a setting: a
// balancing valve or a pressure-independent one.
func (b *Branch) HasValve() bool { return b.Valve != nil || b.PI != nil }

// Range returns the lowest and highest setting of the branch's valve (0, 0
// without one).
func (b *Branch) Range() (lo, hi float64) {
	switch {
	case b.Valve != nil:
		return b.Valve.Range()
	case b.PI != nil:
		return b.PI.Range()
	}
	return 0, 0
}

// Controlled reports whether the branch is a riser whose differential a
// controller holds.
func (b *Branch) Controlled() bool { return b.Controller.Has() && b.Riser() }

// Riser reports whether the branch feeds sub-branches.
func (b *Branch) Riser() bool { return len(b.Children) > 0 }

// Params are the multipliers the calibration fits, all 1 at design.
type Params struct {
	Resistance []float64 // per branch, on its fixed parts
	KvScale    []float64 // per branch, on its balancing valve's Kv
	Header     float64   // on every header segment
	PumpHead   float64   // on the pump's head curve
	// SetPoint is per branch a multiplier on the as-found set point its
	// differential controller really holds (the calibration fits it where
	// a controller's scale may be off); nil means 1 everywhere. A planned
	// set point (State.SetPoints) is what the span is set to read, so it
	// takes no multiplier.
	SetPoint []float64
}

// setPointScale returns branch i's set point multiplier.
func (p Params) setPointScale(i int) float64 {
	if i < len(p.SetPoint) && p.SetPoint[i] > 0 {
		return p.SetPoint[i]
	}
	return 1
}

// Design returns the multipliers of the design model.
func (m *Model) Design() Params {
	p := Params{Resistance: make([]float64, len(m.Branches)), KvScale: make([]float64, len(m.Branches)), Header: 1, PumpHead: 1}
	for i := range p.Resistance {
		p.Resistance[i], p.KvScale[i] = 1, 1
	}
	return p
}

// Clone returns a deep copy of p.
func (p Params) Clone() Params {
	q := p
	q.Resistance = append([]float64(nil), p.Resistance...)
	q.KvScale = append([]float64(nil), p.KvScale...)
	if p.SetPoint != nil {
		q.SetPoint = append([]float64(nil), p.SetPoint...)
	}
	return q
}

// State is one survey state: the valve settings in force and the boundary.
type State struct {
	Label    string
	Settings []float64 // per branch, in the valve's units (NaN for no valve)
	Speed    float64   // pump speed ratio
	// Running is how many of the model's Pumps run, the first ones.
	Running int
	// Differential is the boundary differential in Pa when the boundary is
	// not a pump curve.
	Differential float64
	// SetPoints holds per branch the set point of its differential
	// controller, Pa (NaN without one); nil means the as-found set points.
	SetPoints []float64
	// Bypass marks per branch a three-port terminal whose flow went
	// through its bypass in this state; nil: every one through its coil.
	Bypass   []bool
	Readings []int // indices into Site.Readings
}

// Index returns the index of the branch with the given ID.
func (m *Model) Index(id string) (int, bool) {
	i, ok := m.index[id]
	return i, ok
}

// New builds the model of a site. The site is assumed to have passed the
// site package's structural checks.
func New(s *site.Site) (*Model, error) {
	fl, err := fluidState(s)
	if err != nil {
		return nil, err
	}
	m := &Model{Site: s, Fluid: fl, index: map[string]int{}, orderings: &network.Orderings{}}
	switch s.Header {
	case site.DirectReturn:
		m.Arrangement = network.DirectReturn
	case site.ReverseReturn:
		m.Arrangement = network.ReverseReturn
	default:
		m.Arrangement = network.NoHeaderLoss
	}
	valves := map[string]*site.ValveModel{}
	for i := range s.Valves {
		valves[s.Valves[i].Name] = &s.Valves[i]
	}
	chars := map[*site.ValveModel]any{}
	pipes := pipeCache{}
	for i := range s.Branches {
		sb := &s.Branches[i]
		if _, dup := m.index[sb.ID]; dup {
			return nil, fmt.Errorf("%s: branch %q appears twice: %w", sb.Pos, sb.ID, ErrModel)
		}
		b, err := newBranch(s, sb, valves, chars, pipes)
		if err != nil {
			return nil, err
		}
		b.Index = i
		m.index[sb.ID] = i
		m.Branches = append(m.Branches, b)
	}
	for i := range m.Branches {
		b := &m.Branches[i]
		if b.Parent == "" {
			m.top = append(m.top, i)
			continue
		}
		p, ok := m.index[b.Parent]
		if !ok {
			return nil, fmt.Errorf("%s: branch %q hangs from unknown branch %q: %w", s.Branches[i].Pos, b.ID, b.Parent, ErrModel)
		}
		m.Branches[p].Children = append(m.Branches[p].Children, i)
	}
	if len(m.top) == 0 {
		return nil, fmt.Errorf("no branch hangs from the main headers: %w", ErrModel)
	}
	for i := range m.Branches {
		// A terminal with nothing in it is a short circuit: the network
		// cannot split the flow between it and anything else.
		if b := &m.Branches[i]; !b.Riser() && len(b.Fixed) == 0 && !b.HasValve() {
			return nil, fmt.Errorf("%s: branch %q has nothing that resists flow (no pipe length, fittings, terminal drop, control valve or balancing valve): %w", s.Branches[i].Pos, b.ID, ErrModel)
		}
	}
	for i := range m.Branches {
		if b := &m.Branches[i]; b.Controller.Has() && !b.Riser() {
			return nil, fmt.Errorf("%s: branch %q has a differential controller but no branch hangs from it: %w", s.Branches[i].Pos, b.ID, ErrModel)
		}
	}
	if err := m.checkTree(); err != nil {
		return nil, err
	}
	for i := range m.Branches {
		// A pressure-independent valve belongs at a terminal: on a riser
		// it would hold the whole sub-circuit's flow, which the plan's
		// settings inside it could no longer share out.
		if b := &m.Branches[i]; b.PI != nil && b.Riser() {
			return nil, fmt.Errorf("%s: branch %q feeds sub-branches but names the pressure-independent valve %q, which is modelled at terminals only: %w", s.Branches[i].Pos, b.ID, b.ValveModel.Name, ErrModel)
		}
	}
	if s.Boundary.Kind == site.PumpCurve || s.Boundary.Kind == site.ConstantDiff && len(s.Pump) > 0 {
		// A differential held by a pump whose curve is known is held only
		// while the pump can give it (see Controlled).
		if len(s.Pump) == 0 {
			return nil, fmt.Errorf("boundary is a pump but the pump sheet has no points: %w", ErrModel)
		}
		if err := m.fitPumps(); err != nil {
			return nil, err
		}
		if lift := m.Lift(); lift > 0 {
			// An open circuit whose pump cannot reach the outlet even
			// flat out would be solved with the water running backwards.
			if h := m.Set(1, s.Running("")).AtSpeed(m.MaxSpeed()).ShutOff(); !(h*m.Fluid.Density*hydraulics.StandardGravity > lift) {
				return nil, fmt.Errorf("site sheet: the pump's shut-off head at its maximum speed, %.2f m, does not reach the static lift and outlet pressure, %.2f m: no water would reach the outlet: %w",
					h, lift/(m.Fluid.Density*hydraulics.StandardGravity), ErrModel)
			}
		}
	}
	if m.PumpIDs == nil {
		m.PumpIDs = s.Pumps() // named, for readings, even where no curve is used
	}
	m.States, err = m.states()
	if err != nil {
		return nil, err
	}
	for _, r := range s.Readings {
		if _, ok := m.PumpIndex(r.Where); ok && len(m.Pumps) == 0 {
			return nil, fmt.Errorf("%s: a reading at pump %s needs the pumps' curves in the model: boundary pump or constant-differential: %w", r.Pos, r.Where, ErrModel)
		}
	}
	return m, nil
}

// fitPumps fits each pump's curve to its points on the pump sheet.
func (m *Model) fitPumps() error {
	s := m.Site
	m.Series = s.PumpSeries
	m.PumpIDs = s.Pumps()
	for _, id := range m.PumpIDs {
		var pts []hydraulics.PumpPoint
		var eff hydraulics.EfficiencyCurve
		speed := 0.0
		for _, p := range s.Pump {
			if p.Pump == id {
				pts = append(pts, hydraulics.PumpPoint{Flow: p.Flow, Head: p.Head})
				if p.Speed > 0 {
					speed = p.Speed
				}
				if p.Efficiency > 0 {
					eff.Flow = append(eff.Flow, p.Flow)
					eff.Eff = append(eff.Eff, p.Efficiency)
				}
			}
		}
		c, rep, err := hydraulics.FitPump(pts)
		if err != nil {
			if id != "" {
				return fmt.Errorf("pump %s's curve: %w", id, err)
			}
			return fmt.Errorf("pump curve: %w", err)
		}
		if m.Pump == nil {
			m.Pump, m.PumpFit = &c, rep
		}
		m.Pumps = append(m.Pumps, hydraulics.SetMember{Curve: c, Speed: speed})
		m.PumpFits = append(m.PumpFits, rep)
		m.PumpEff = append(m.PumpEff, eff)
	}
	return nil
}

// PumpDuty is one running pump's share of its set's duty.
type PumpDuty struct {
	ID         string
	Flow, Head float64 // m3/s, m
	Speed      float64 // speed ratio
	// Efficiency is the pump's at its duty from its efficiency points
	// (Given), else the efficiency the caller gave for pumps without;
	// InRange is false where the duty lies beyond the points.
	Efficiency     float64
	Given, InRange bool
	// Beyond reports a duty past the last point of the pump's curve (at
	// its speed): the fitted curve is extrapolated there.
	Beyond bool
}

// Shaft returns the pump's shaft power in W: ρ g Q H / η.
func (d PumpDuty) Shaft(f fluid.State) float64 {
	if d.Flow == 0 {
		return 0 // held shut by its non-return valve
	}
	return f.Density * hydraulics.StandardGravity * d.Flow * d.Head / d.Efficiency
}

// Duties returns the share of each of the first running pumps (head
// multiplier k, set speed ratio speed) when together they give total flow
// q: in parallel each pump's flow at the common head, in series each pump's
// head at q. eta is the efficiency of a pump without efficiency points.
func (m *Model) Duties(k float64, running int, speed, q, eta float64) []PumpDuty {
	set := m.Set(k, running).AtSpeed(speed)
	flows, heads, speeds := set.Flows(q), set.Heads(q), m.speeds(running, speed)
	out := make([]PumpDuty, len(flows))
	for i := range out {
		d := PumpDuty{ID: m.PumpIDs[i], Flow: flows[i], Head: heads[i], Speed: speeds[i], Efficiency: eta, InRange: true}
		if qmax := m.Pumps[i].Curve.QMax * speeds[i]; qmax > 0 && flows[i] > qmax*(1+1e-9) {
			d.Beyond = true
		}
		if e, in := m.PumpEff[i].At(flows[i], speeds[i]); e > 0 {
			d.Efficiency, d.Given, d.InRange = e, true, in
		}
		out[i] = d
	}
	return out
}

// EfficiencyGiven reports whether any pump has efficiency points.
func (m *Model) EfficiencyGiven() bool {
	for _, e := range m.PumpEff {
		if len(e.Flow) > 0 {
			return true
		}
	}
	return false
}

// PumpIndex returns the index in Pumps of the pump with id (one of several
// pumps named on the pump sheet).
func (m *Model) PumpIndex(id string) (int, bool) {
	if id == "" || len(m.PumpIDs) < 2 {
		return 0, false
	}
	for i, p := range m.PumpIDs {
		if p == id {
			return i, true
		}
	}
	return 0, false
}

// PumpReading returns the value of a reading at pump i of several (a
// pump diff, total flow or speed) when the set gives flow q at differential
// dp (Pa, lift included) in state st with head multiplier k: in parallel
// its flow at the common head and the common differential, in series the
// flow and its own head; its own fixed speed or the set's. The set's speed
// is the state's on a pump boundary and, on a Controlled one, the speed at
// which the drive gives dp at q (its maximum at most). A pump that does
// not run in the state gives no flow and shows no speed; in parallel it
// sees the common differential across its non-return valve.
func (m *Model) PumpReading(what site.Quantity, i int, st State, k, q, dp float64) float64 {
	running := st.Running
	if running <= 0 || running > len(m.Pumps) {
		running = len(m.Pumps)
	}
	if i >= running {
		if what == site.PumpDiff {
			return dp
		}
		return 0
	}
	set := m.Set(k, running)
	s := st.Speed
	if m.Controlled() {
		s = set.SpeedFor(q, dp, m.Fluid)
		if !(s <= m.MaxSpeed()) {
			s = m.MaxSpeed()
		}
	}
	set = set.AtSpeed(s)
	switch what {
	case site.TotalFlow:
		return set.Flows(q)[i]
	case site.PumpDiff:
		if !m.Series {
			return dp
		}
		return set.Heads(q)[i] * m.Fluid.Density * hydraulics.StandardGravity
	case site.Speed:
		return m.speeds(running, s)[i]
	}
	return math.NaN()
}

// Several reports whether the site has more than one pump (running or
// standing by).
func (m *Model) Several() bool { return len(m.Pumps) > 1 }

// Set returns the first running pumps of the model as a set with every
// head multiplied by k, at rated speed. A site of one pump gives a set of
// that one pump (see hydraulics.PumpSet: exactly the Pump). Where every one
// of them has its own speed, the set's speed turns each from its own
// (hydraulics.PumpSet.Relative: at 1, each as given), so a state's speed
// and the plan's are ratios to those speeds.
func (m *Model) Set(k float64, running int) hydraulics.PumpSet {
	if running <= 0 || running > len(m.Pumps) {
		running = len(m.Pumps)
	}
	s := hydraulics.PumpSet{Members: m.Pumps[:running], Series: m.Series}.Scaled(k)
	if r, ok := s.Relative(); ok {
		return r
	}
	return s
}

// speeds returns each of the first running pumps' speed ratio at set speed
// ratio speed: its own fixed one, the set's, or (every one on its own) its
// own turned by the set's.
func (m *Model) speeds(running int, speed float64) []float64 {
	if running <= 0 || running > len(m.Pumps) {
		running = len(m.Pumps)
	}
	_, relative := hydraulics.PumpSet{Members: m.Pumps[:running]}.Relative()
	out := make([]float64, running)
	for i, p := range m.Pumps[:running] {
		switch {
		case relative:
			out[i] = p.Speed * speed
		case p.Speed > 0:
			out[i] = p.Speed
		default:
			out[i] = speed
		}
	}
	return out
}

// fluidState gives the fluid's properties at the survey temperature: from
// the property tables, with any property given as measured in the site
// sheet in place of the table's. A density and a viscosity given together
// need no table (a fluid not in them, or one outside their range).
func fluidState(s *site.Site) (fluid.State, error) {
	st := fluid.State{Temperature: s.Temperature}
	if !(s.Density > 0 && (s.Viscosity > 0 || s.KinematicViscosity > 0)) {
		if s.Fluid == site.OtherFluid {
			return fluid.State{}, fmt.Errorf("fluid other needs its density and viscosity in the site sheet: %w", ErrModel)
		}
		k, err := fluid.ParseKind(s.Fluid)
		if err != nil {
			return fluid.State{}, fmt.Errorf("fluid: %w", err)
		}
		spec := fluid.Spec{Kind: k, Percent: s.GlycolPercent}
		if k == fluid.PlainWater {
			spec.Percent = 0
		}
		if st, err = spec.At(s.Temperature); err != nil {
			return fluid.State{}, fmt.Errorf("fluid %s at %.1f degC: %w", spec, s.Temperature-273.15, err)
		}
	}
	if s.Density > 0 {
		st.Density = s.Density
	}
	switch {
	case s.Viscosity > 0:
		st.Viscosity = s.Viscosity
	case s.KinematicViscosity > 0:
		// A kinematic viscosity is measured on the sample itself, so it
		// goes with the density in force (as measured when given).
		st.Viscosity = s.KinematicViscosity * st.Density
	}
	return st, nil
}

// newBranch builds branch sb. chars and pipes hold the characteristics and
// pipe lookups made so far: a site has far fewer valve models and pipe
// sizes than branches.
func newBranch(s *site.Site, sb *site.Branch, valves map[string]*site.ValveModel, chars map[*site.ValveModel]any, pipes pipeCache) (Branch, error) {
	b := Branch{ID: sb.ID, Parent: sb.Parent, Design: sb.DesignFlow, Target: sb.DesignFlow, Controller: sb.Controller}
	if t, ok := s.Targets[sb.ID]; ok {
		b.Target = t
	}
	where := func(err error) error { return fmt.Errorf("%s: branch %q: %w", sb.Pos, sb.ID, err) }
	if sb.PipeLength > 0 {
		bore, rough, err := pipes.bore(sb.PipeStandard, sb.PipeSize, sb.PipeBore, sb.Roughness)
		if err != nil {
			return b, where(err)
		}
		b.Bore = bore
		b.Fixed = append(b.Fixed, hydraulics.Pipe{Bore: bore, Length: sb.PipeLength, Roughness: rough})
		if sb.FittingsK > 0 {
			b.Fixed = append(b.Fixed, hydraulics.Fitting{K: sb.FittingsK, Bore: bore})
		}
	} else if sb.FittingsK > 0 {
		bore, _, err := pipes.bore(sb.PipeStandard, sb.PipeSize, sb.PipeBore, sb.Roughness)
		if err != nil {
			return b, where(fmt.Errorf("fittings K needs a pipe size or bore: %w", err))
		}
		b.Bore = bore
		b.Fixed = append(b.Fixed, hydraulics.Fitting{K: sb.FittingsK, Bore: bore})
	}
	if sb.TerminalDrop > 0 {
		rf := sb.TerminalFlow
		if math.IsNaN(rf) || rf <= 0 {
			rf = sb.DesignFlow
		}
		b.Fixed = append(b.Fixed, hydraulics.Terminal{RatedDrop: sb.TerminalDrop, RatedFlow: rf})
	}
	if sb.ControlKvs > 0 && !math.IsNaN(sb.ControlKvs) {
		b.Fixed = append(b.Fixed, hydraulics.FixedKv{Kv: sb.ControlKvs})
	}
	if sb.BypassValve != "" {
		vm, ok := valves[sb.BypassValve]
		if !ok || vm.PressureIndependent() {
			return b, where(fmt.Errorf("bypass valve model %q is not a regulating valve on the valves sheet: %w", sb.BypassValve, ErrModel))
		}
		c, ok := chars[vm]
		if !ok {
			var err error
			if c, err = Characteristic(vm); err != nil {
				return b, where(err)
			}
			chars[vm] = c
		}
		b.Bypass, b.BypassModel = c.(hydraulics.Characteristic), vm
		_, b.BypassAsFound = b.Bypass.Range()
		if !math.IsNaN(sb.BypassSetting) {
			b.BypassAsFound = sb.BypassSetting
		}
		for _, e := range b.Fixed {
			if _, coil := e.(hydraulics.Terminal); !coil {
				b.BypassFixed = append(b.BypassFixed, e)
			}
		}
	}
	if sb.Valve != "" {
		vm, ok := valves[sb.Valve]
		if !ok {
			return b, where(fmt.Errorf("valve model %q is not on the valves sheet: %w", sb.Valve, ErrModel))
		}
		c, ok := chars[vm]
		if !ok {
			var err error
			if vm.PressureIndependent() {
				var t hydraulics.PressureIndependentTable
				t, err = hydraulics.NewPressureIndependentTable(vm.Settings, vm.MaxFlow, vm.Kv, vm.HoldDiff, vm.Step)
				c = &t
			} else {
				c, err = Characteristic(vm)
			}
			if err != nil {
				return b, where(fmt.Errorf("valve %q: %w", vm.Name, err))
			}
			chars[vm] = c
		}
		var hi float64
		switch c := c.(type) {
		case *hydraulics.PressureIndependentTable:
			b.PI = c
			_, hi = c.Range()
		case hydraulics.Characteristic:
			b.Valve = c
			_, hi = c.Range()
		}
		b.ValveModel = vm
		b.AsFound = hi
		if !math.IsNaN(sb.Setting) {
			b.AsFound, b.Recorded = sb.Setting, true
		}
	}
	if len(b.Fixed) == 0 && !b.HasValve() {
		// A branch with nothing in it would be a short circuit; it is
		// allowed only as a riser whose children carry the resistance.
		b.Fixed = nil
	}
	// Each leg of the header segment is built from its own pipe: in a
	// reverse-return header the two legs carry different flows and are
	// often of different bores.
	for _, leg := range []struct {
		name string
		l    site.Leg
		dst  *[]hydraulics.Element
	}{{"supply", sb.SupplyLeg(), &b.Supply}, {"return", sb.ReturnLeg(), &b.Return}} {
		if !(leg.l.Length > 0 || leg.l.K > 0) {
			continue
		}
		bore, rough, err := pipes.bore(leg.l.Standard, leg.l.Size, leg.l.Bore, leg.l.Roughness)
		if err != nil {
			return b, where(fmt.Errorf("header segment, %s leg: %w", leg.name, err))
		}
		if leg.l.Length > 0 {
			*leg.dst = append(*leg.dst, hydraulics.Pipe{Bore: bore, Length: leg.l.Length, Roughness: rough})
		}
		if leg.l.K > 0 {
			*leg.dst = append(*leg.dst, hydraulics.Fitting{K: leg.l.K, Bore: bore})
		}
	}
	return b, nil
}

// pipeCache remembers the catalogue lookups of one New, by standard and
// size ("" size: the standard's roughness).
type pipeCache map[[2]string]pipeLookup

type pipeLookup struct {
	bore, rough float64
	err         error
}

// bore returns the bore and roughness of a pipe given by its bore or by
// standard and size; a NaN roughness means the standard's (steel's when
// none is named).
func (c pipeCache) bore(standard, size string, bore, rough float64) (float64, float64, error) {
	if !math.IsNaN(bore) && bore > 0 {
		if math.IsNaN(rough) {
			rough = hydraulics.RoughnessSteel
			if standard != "" {
				r, ok := c[[2]string{standard, ""}]
				if !ok {
					r.rough, r.err = hydraulics.StandardRoughness(standard)
					c[[2]string{standard, ""}] = r
				}
				if r.err == nil {
					rough = r.rough
				}
			}
		}
		return bore, rough, nil
	}
	if standard == "" || size == "" {
		return 0, 0, fmt.Errorf("no bore and no pipe standard and size: %w", ErrModel)
	}
	key := [2]string{standard, size}
	r, ok := c[key]
	if !ok {
		ps, err := hydraulics.LookupPipe(standard, size)
		r = pipeLookup{ps.Bore, ps.Roughness, err}
		c[key] = r
	}
	if r.err != nil {
		return 0, 0, r.err
	}
	if math.IsNaN(rough) {
		rough = r.rough
	}
	return r.bore, rough, nil
}

// Characteristic turns a valve model of the sheets into its characteristic.
// Generic characteristics take their setting in % of travel.
func Characteristic(vm *site.ValveModel) (hydraulics.Characteristic, error) {
	if vm.Table() {
		t, err := hydraulics.NewTable(vm.Settings, vm.Kv, vm.Step)
		if err != nil {
			return nil, fmt.Errorf("valve %q: %w", vm.Name, err)
		}
		return t, nil
	}
	var k hydraulics.Kind
	switch vm.Characteristic {
	case "linear":
		k = hydraulics.Linear
	case "equal-percentage":
		k = hydraulics.EqualPercentage
	case "quick-opening":
		k = hydraulics.QuickOpening
	default:
		return nil, fmt.Errorf("valve %q: unknown characteristic %q: %w", vm.Name, vm.Characteristic, ErrModel)
	}
	in := hydraulics.Inherent{Kind: k, Kvs: vm.Kvs, Rangeability: vm.Rangeability}
	if err := in.Validate(); err != nil {
		return nil, fmt.Errorf("valve %q: %w", vm.Name, err)
	}
	return percent{in, vm.Step}, nil
}

// percent presents an inherent characteristic (relative travel 0-1) in % of
// travel, the unit technicians read on a generic valve.
type percent struct {
	in   hydraulics.Inherent
	step float64
}

func (p percent) KvAt(s float64) (float64, error) { return p.in.KvAt(s / 100) }
func (p percent) SettingFor(kv float64) (float64, error) {
	h, err := p.in.SettingFor(kv)
	return h * 100, err
}
func (p percent) Range() (float64, float64) { return 0, 100 }
func (p percent) Resolution() float64       { return p.step }

func (m *Model) checkTree() error {
	seen := make([]int, len(m.Branches)) // 0 new, 1 on path, 2 done
	var visit func(i int) error
	visit = func(i int) error {
		if seen[i] == 1 {
			return fmt.Errorf("branches %q and its sub-circuits form a loop: %w", m.Branches[i].ID, ErrModel)
		}
		if seen[i] == 2 {
			return nil
		}
		seen[i] = 1
		for _, c := range m.Branches[i].Children {
			if err := visit(c); err != nil {
				return err
			}
		}
		seen[i] = 2
		return nil
	}
	for _, i := range m.top {
		if err := visit(i); err != nil {
			return err
		}
	}
	for i, s := range seen {
		if s == 0 {
			return fmt.Errorf("branch %q is not reachable from the main headers (its parents form a loop): %w", m.Branches[i].ID, ErrModel)
		}
	}
	return nil
}

// states groups the readings by survey state label, in order of first
// appearance, and works out each state's valve settings.
func (m *Model) states() ([]State, error) {
	s := m.Site
	byLabel := map[string]int{}
	var out []State
	for ri, r := range s.Readings {
		k, ok := byLabel[r.State]
		if !ok {
			k = len(out)
			byLabel[r.State] = k
			st := State{Label: r.State, Settings: m.AsFound(), Speed: speed(s), Differential: s.Boundary.SetPoint, Running: s.Running(r.State)}
			// The states sheet gives a state its own pump setting; the
			// site reader keeps only the one the boundary uses.
			if own := s.State(r.State); own != nil {
				if own.Speed > 0 && s.Boundary.Kind == site.PumpCurve {
					st.Speed = own.Speed
				}
				if own.SetPoint > 0 && s.Boundary.Kind == site.ConstantDiff {
					st.Differential = own.SetPoint
				}
			}
			out = append(out, st)
		}
		out[k].Readings = append(out[k].Readings, ri)
	}
	for k := range out {
		st := &out[k]
		set := map[int]float64{}
		for _, ri := range st.Readings {
			r := s.Readings[ri]
			i, ok := m.index[r.Where]
			if !ok || math.IsNaN(r.Setting) {
				continue
			}
			if !m.Branches[i].HasValve() {
				return nil, fmt.Errorf("%s: reading gives a valve setting for branch %q, which has no balancing valve: %w", r.Pos, r.Where, ErrModel)
			}
			if old, dup := set[i]; dup && old != r.Setting {
				return nil, fmt.Errorf("%s: state %q gives branch %q two settings (%g and %g): %w", r.Pos, st.Label, r.Where, old, r.Setting, ErrModel)
			}
			set[i] = r.Setting
			st.Settings[i] = r.Setting
		}
		for _, mv := range s.Moves {
			if mv.State != st.Label {
				continue
			}
			i, ok := m.index[mv.Branch]
			if !ok || !m.Branches[i].HasValve() {
				return nil, fmt.Errorf("%s: moves sheet gives a valve setting for branch %q, which has no balancing valve: %w", mv.Pos, mv.Branch, ErrModel)
			}
			if old, dup := set[i]; dup && old != mv.Setting {
				return nil, fmt.Errorf("%s: state %q gives branch %q two settings (%g and %g): %w", mv.Pos, st.Label, mv.Branch, old, mv.Setting, ErrModel)
			}
			set[i] = mv.Setting
			st.Settings[i] = mv.Setting
		}
		for _, ri := range st.Readings {
			r := s.Readings[ri]
			i, ok := m.index[r.Where]
			if !ok || !r.Bypass {
				continue
			}
			if m.Branches[i].Bypass == nil {
				return nil, fmt.Errorf("%s: reading taken in the bypass position at branch %q, which has no bypass valve: %w", r.Pos, r.Where, ErrModel)
			}
			if st.Bypass == nil {
				st.Bypass = make([]bool, len(m.Branches))
			}
			st.Bypass[i] = true
		}
		if s.Boundary.Kind == site.MeasuredDiff {
			d, err := m.measuredDiff(st)
			if err != nil {
				return nil, err
			}
			st.Differential = d
		}
	}
	return out, nil
}

// measuredDiff is the boundary differential of a state read at the header or
// pump; the mean where several readings give it.
func (m *Model) measuredDiff(st *State) (float64, error) {
	var sum float64
	var n int
	var pos site.Pos // of the first differential reading
	for _, ri := range st.Readings {
		r := m.Site.Readings[ri]
		_, atBranch := m.index[r.Where]
		if _, onePump := m.PumpIndex(r.Where); onePump && m.Series {
			continue // one pump's part of the differential
		}
		if r.What == site.PumpDiff || (r.What == site.HeaderDiff && !atBranch) {
			if n == 0 {
				pos = r.Pos
			}
			sum += r.Value
			if r.What == site.HeaderDiff {
				// The state's differential is the pump's: an open
				// circuit's lift is not in the headers' differential.
				sum += m.Lift()
			}
			n++
		}
	}
	if n == 0 {
		return 0, fmt.Errorf("boundary is the measured differential but state %q has no header or pump differential reading: %w", st.Label, ErrModel)
	}
	if !(sum > 0) {
		return 0, fmt.Errorf("%s: boundary is the measured differential but state %q reads 0 Pa, which drives no flow: %w", pos, st.Label, ErrModel)
	}
	return sum / float64(n), nil
}

func speed(s *site.Site) float64 {
	if s.Boundary.Speed > 0 {
		return s.Boundary.Speed
	}
	return 1
}

// AsFound returns the as-found valve settings (NaN for branches without a
// balancing valve).
func (m *Model) AsFound() []float64 {
	out := make([]float64, len(m.Branches))
	for i, b := range m.Branches {
		out[i] = math.NaN()
		if b.HasValve() {
			out[i] = b.AsFound
		}
	}
	return out
}

// Open returns every balancing valve fully open.
func (m *Model) Open() []float64 {
	out := make([]float64, len(m.Branches))
	for i, b := range m.Branches {
		out[i] = math.NaN()
		if b.HasValve() {
			_, out[i] = b.Range()
		}
	}
	return out
}

// BaseState is the as-found state with the site's boundary, for sites with
// no survey.
func (m *Model) BaseState() State {
	return State{Label: "design", Settings: m.AsFound(), Speed: speed(m.Site), Differential: m.Site.Boundary.SetPoint, Running: m.Site.Running("")}
}

// FixedElement returns branch i's fixed parts scaled by r, or nil when it
// has none.
func (m *Model) FixedElement(i int, r float64) hydraulics.Element {
	return scaledParts(m.Branches[i].Fixed, r)
}

// scaledParts is parts in series scaled by r, or nil for none.
func scaledParts(parts []hydraulics.Element, r float64) hydraulics.Element {
	if len(parts) == 0 {
		return nil
	}
	var e hydraulics.Element = hydraulics.Series(parts)
	if len(parts) == 1 {
		e = parts[0]
	}
	if r == 1 {
		return e
	}
	return hydraulics.Scaled{E: e, Factor: r}
}

// Bypassed reports whether branch i's flow goes through its three-port
// bypass in state st.
func (st State) Bypassed(i int) bool { return st.Bypass != nil && st.Bypass[i] }

// FixedIn returns branch i's fixed parts scaled by r in state st: through
// the coil (FixedElement) or, its three-port valve to bypass, the same
// parts without the terminal. One multiplier scales the parts in either
// position (an approximation: a fouled coil is seen in the bypass's pipe
// too).
func (m *Model) FixedIn(i int, r float64, st State) hydraulics.Element {
	if !st.Bypassed(i) {
		return m.FixedElement(i, r)
	}
	return scaledParts(m.Branches[i].BypassFixed, r)
}

// BypassElement returns branch i's bypass valve at a setting, or nil
// without one.
func (m *Model) BypassElement(i int, setting float64) hydraulics.Element {
	b := &m.Branches[i]
	if b.Bypass == nil {
		return nil
	}
	v, _ := hydraulics.NewValve(b.Bypass, setting, 1)
	return v
}

// ElementsIn returns branch i's series parts for multipliers p in state st:
// Elements, or with its three-port valve to bypass, its parts without the
// terminal, its balancing valve and its bypass valve at its as-found
// setting.
func (m *Model) ElementsIn(i int, p Params, st State) []hydraulics.Element {
	if !st.Bypassed(i) {
		return m.Elements(i, p, st.Settings[i])
	}
	var e []hydraulics.Element
	if f := m.FixedIn(i, p.Resistance[i], st); f != nil {
		e = append(e, f)
	}
	if v := m.ValveElement(i, st.Settings[i], p.KvScale[i]); v != nil {
		e = append(e, v)
	}
	return append(e, m.BypassElement(i, m.Branches[i].BypassAsFound))
}

// ValveElement returns branch i's balancing valve at a setting and Kv scale,
// or nil when it has none. The valve works out its Kv once (an invalid one
// is kept as it is, and its Drop gives NaN for the solver to report). A
// pressure-independent valve is returned at its setting with flow and Kv
// scaled by kvScale (outside its table: an invalid valve, whose Drop gives
// NaN).
func (m *Model) ValveElement(i int, setting, kvScale float64) hydraulics.Element {
	b := &m.Branches[i]
	if b.PI != nil {
		v, _ := b.PI.At(setting, kvScale)
		return v
	}
	if b.Valve == nil {
		return nil
	}
	v, _ := hydraulics.NewValve(b.Valve, setting, kvScale)
	return v
}

// Elements returns branch i's series parts for given multipliers and setting.
func (m *Model) Elements(i int, p Params, setting float64) []hydraulics.Element {
	var e []hydraulics.Element
	if f := m.FixedElement(i, p.Resistance[i]); f != nil {
		e = append(e, f)
	}
	if v := m.ValveElement(i, setting, p.KvScale[i]); v != nil {
		e = append(e, v)
	}
	return e
}

func scaleAll(es []hydraulics.Element, f float64) []hydraulics.Element {
	if f == 1 || len(es) == 0 {
		return es
	}
	out := make([]hydraulics.Element, len(es))
	for i, e := range es {
		out[i] = hydraulics.Scaled{E: e, Factor: f}
	}
	return out
}

// HasControllers reports whether any riser has a differential controller.
func (m *Model) HasControllers() bool {
	for i := range m.Branches {
		if m.Branches[i].Controlled() {
			return true
		}
	}
	return false
}

// SetPoint returns branch i's controller set point in state st, Pa (NaN
// without a controller).
func (m *Model) SetPoint(st State, i int) float64 {
	if !m.Branches[i].Controlled() {
		return math.NaN()
	}
	if st.SetPoints != nil && st.SetPoints[i] > 0 {
		return st.SetPoints[i]
	}
	return m.Branches[i].Controller.SetPoint
}

// HeldSetPoint returns the set point riser i's controller holds under
// multipliers p with set points setPoints (nil: as found), Pa: a planned
// set point as given, the as-found one times p's multiplier; NaN without a
// controller.
func (m *Model) HeldSetPoint(p Params, setPoints []float64, i int) float64 {
	if setPoints != nil && setPoints[i] > 0 {
		return m.SetPoint(State{SetPoints: setPoints}, i)
	}
	return m.SetPoint(State{}, i) * p.setPointScale(i)
}

// Ladder returns the network ladder for multipliers p and settings, each
// differential controller at its set point in setPoints (nil: as found).
// A controller's element needs the flow its span passes at its set point,
// so each controlled riser's span is solved alone first, from the deepest
// up (see hydraulics.DiffController).
func (m *Model) Ladder(p Params, settings, setPoints []float64) (network.Ladder, error) {
	return m.ladder(p, State{Settings: settings, SetPoints: setPoints})
}

// LadderIn returns the network ladder for multipliers p in state st: its
// settings, set points and three-port valves' positions.
func (m *Model) LadderIn(p Params, st State) (network.Ladder, error) { return m.ladder(p, st) }

func (m *Model) ladder(p Params, st State) (network.Ladder, error) {
	setPoints := st.SetPoints
	var build func(ids []int) (*network.Ladder, error)
	build = func(ids []int) (*network.Ladder, error) {
		l := &network.Ladder{Arrangement: m.Arrangement}
		for _, i := range ids {
			b := &m.Branches[i]
			nb := network.Branch{
				ID:       b.ID,
				Elements: m.ElementsIn(i, p, st),
				Supply:   scaleAll(b.Supply, p.Header),
				Return:   scaleAll(b.Return, p.Header),
			}
			if b.Riser() {
				sub, err := build(b.Children)
				if err != nil {
					return nil, err
				}
				nb.Sub = sub
				if b.Controlled() {
					nb.ControlBelow = b.Controller.Below()
					c, err := m.controller(nb, m.HeldSetPoint(p, setPoints, i))
					if err != nil {
						return nil, err
					}
					nb.Control = c
				}
			}
			l.Branches = append(l.Branches, nb)
		}
		return l, nil
	}
	l, err := build(m.top)
	if err != nil {
		return network.Ladder{}, err
	}
	return *l, nil
}

// controller returns the element of riser nb's controller at set point sp.
func (m *Model) controller(nb network.Branch, sp float64) (hydraulics.DiffController, error) {
	i := m.index[nb.ID]
	c := hydraulics.DiffController{Kvs: m.Branches[i].Controller.Kvs, SetPoint: sp}
	hold, err := network.HeldFlow(context.Background(), nb, sp, m.Fluid)
	if err != nil {
		return c, fmt.Errorf("%s: branch %q: differential controller: %w", m.Site.Branches[i].Pos, nb.ID, err)
	}
	c.Hold = hold
	if err := c.Validate(); err != nil {
		return c, fmt.Errorf("%s: branch %q: %w: %w", m.Site.Branches[i].Pos, nb.ID, err, ErrModel)
	}
	return c, nil
}

// ControllerIn returns the element of riser i's differential controller
// for multipliers p in state st (its settings, set points, nil for as
// found, and three-port valves' positions); ok is false without a
// controller.
func (m *Model) ControllerIn(i int, p Params, st State) (c hydraulics.DiffController, ok bool, err error) {
	if !m.Branches[i].Controlled() {
		return c, false, nil
	}
	l, err := m.spanLadder(i, p, st)
	if err != nil {
		return c, true, err
	}
	c, _ = l.Branches[0].Control.(hydraulics.DiffController)
	return c, true, nil
}

// spanLadder returns the ladder of riser i alone in state st (its
// controllers built).
func (m *Model) spanLadder(i int, p Params, st State) (network.Ladder, error) {
	m2 := *m
	m2.top = []int{i}
	return m2.LadderIn(p, st)
}

// Span returns the network of the span riser i's controller holds in state
// st, solved alone at its set point: the riser's own parts as the main (link
// network.MainID, absent when it has none or they lie outside the span)
// and its sub-ladder, link and
// node IDs as in the whole network. Its source flow is the controller's
// Hold; the calibration differentiates Hold through it.
func (m *Model) Span(ctx context.Context, i int, p Params, st State) (*network.Built, *network.Solution, error) {
	if !m.Branches[i].Controlled() {
		return nil, nil, fmt.Errorf("branch %q has no differential controller: %w", m.Branches[i].ID, ErrModel)
	}
	l, err := m.spanLadder(i, p, st)
	if err != nil {
		return nil, nil, err
	}
	br := l.Branches[0]
	src := network.Source{Differential: m.HeldSetPoint(p, st.SetPoints, i), Main: br.Elements}
	if br.ControlBelow {
		src.Main = nil
	}
	b, err := m.Build(*br.Sub, src)
	if err != nil {
		return nil, nil, err
	}
	sol, err := b.Net.Solve(ctx, nil)
	if err != nil {
		return nil, nil, err
	}
	return b, sol, nil
}

// Controlled reports whether the circuit is driven by a variable-speed pump
// whose drive holds a differential set point while it can and runs at its
// maximum speed when it cannot: a constant-differential boundary with a pump
// curve. Pumps that cannot hold their set point are common on exactly the
// plants that get surveyed, so the model never assumes the set point holds.
func (m *Model) Controlled() bool {
	return m.Site.Boundary.Kind == site.ConstantDiff && m.Pump != nil
}

// PumpDriven reports whether a pump curve sets the circuit's differential in
// some state: a pump boundary or a Controlled one.
func (m *Model) PumpDriven() bool {
	return m.Pump != nil && (m.Site.Boundary.Kind == site.PumpCurve || m.Controlled())
}

// MaxSpeed returns the highest speed ratio the drive allows (1 when not
// given).
func (m *Model) MaxSpeed() float64 {
	if v := m.Site.Boundary.MaxSpeed; v > 0 {
		return v
	}
	return 1
}

// ScaledPump returns the pump curve at rated speed with head multiplier k, or
// nil without one.
func (m *Model) ScaledPump(k float64) *hydraulics.PumpCurve {
	if m.Pump == nil {
		return nil
	}
	c := *m.Pump
	c.A0 *= k
	c.A1 *= k
	c.A2 *= k
	return &c
}

// Lift returns the static head of an open circuit in Pa: the site's static
// lift as a height of the circulating fluid plus the open outlet's
// pressure; 0 for a closed loop. The pump gives it before any water moves,
// so it is in every pump differential (read, predicted or planned) and in
// no branch or header differential.
func (m *Model) Lift() float64 {
	s := m.Site
	return m.Fluid.Density*hydraulics.StandardGravity*max(s.StaticLift, 0) + max(s.OutletPressure, 0)
}

// Source returns the network source for multipliers p and state st. A
// state's Differential is the pump's (static lift included); the network
// takes the lift from it.
func (m *Model) Source(p Params, st State) network.Source {
	lift := m.Lift()
	switch {
	case m.Site.Boundary.Kind == site.PumpCurve && m.Pump != nil && m.Several():
		return network.Source{Pump: m.Set(p.PumpHead, st.Running).AtSpeed(st.Speed), Lift: lift}
	case m.Site.Boundary.Kind == site.PumpCurve && m.Pump != nil:
		return network.Source{Pump: hydraulics.Pump{Curve: *m.ScaledPump(p.PumpHead), Speed: st.Speed}, Lift: lift}
	case m.Controlled():
		cp := hydraulics.ControlledPump{Curve: *m.ScaledPump(p.PumpHead), MaxSpeed: m.MaxSpeed(), SetPoint: st.Differential}
		if m.Several() {
			cp.Set = m.Set(p.PumpHead, st.Running)
		}
		return network.Source{Pump: cp, Lift: lift}
	}
	return network.Source{Differential: st.Differential, Lift: lift}
}

// PumpHeadDrop returns d(drop)/d(ln PumpHead) of the source link at flow q
// in state st: the pump's drop where its curve sets it, 0 where a drive holds
// the set point (or there is no pump).
func (m *Model) PumpHeadDrop(p Params, st State, q float64) float64 {
	src := m.Source(p, st)
	switch e := src.Pump.(type) {
	case hydraulics.Pump:
		dp, _ := e.Drop(q, m.Fluid)
		return dp
	case hydraulics.PumpSet:
		// Every member's head is scaled by PumpHead, so the set's is.
		dp, _ := e.Drop(q, m.Fluid)
		return dp
	case hydraulics.ControlledPump:
		if e.Saturated(q, m.Fluid) {
			dp, _ := e.Drop(q, m.Fluid)
			return dp
		}
	}
	return 0
}

// Solved is a model solved for one state.
type Solved struct {
	Model  *Model
	Params Params
	State  State
	Built  *network.Built
	Sol    *network.Solution
}

// Solve builds and solves the network of multipliers p in state st.
func (m *Model) Solve(ctx context.Context, p Params, st State) (*Solved, error) {
	if !(st.Differential > 0) && !(m.Site.Boundary.Kind == site.PumpCurve && m.Pump != nil) {
		return nil, fmt.Errorf("state %q: no pump curve and no positive differential to drive the circuit: %w", st.Label, ErrModel)
	}
	if lift := m.Lift(); m.Pump == nil && !(st.Differential > lift) {
		return nil, fmt.Errorf("state %q: the differential %.1f kPa does not exceed the static lift %.1f kPa, so no water reaches the outlet: %w", st.Label, st.Differential/1e3, lift/1e3, ErrModel)
	}
	l, err := m.LadderIn(p, st)
	if err != nil {
		return nil, err
	}
	built, err := m.Build(l, m.Source(p, st))
	if err != nil {
		return nil, err
	}
	sol, err := built.Net.Solve(ctx, nil)
	if err != nil {
		return nil, fmt.Errorf("state %q: %w", st.Label, err)
	}
	return &Solved{Model: m, Params: p, State: st, Built: built, Sol: sol}, nil
}

// Flow returns branch i's flow, m3/s. A riser's flow is its own link's, or
// the sum of its children's when it has no parts of its own.
func (s *Solved) Flow(i int) float64 {
	b := &s.Model.Branches[i]
	if l := s.Built.Branch[b.ID]; l >= 0 {
		return s.Sol.Flow[l]
	}
	var q float64
	for _, c := range b.Children {
		q += s.Flow(c)
	}
	return q
}

// BranchDiff returns the differential across branch i's take-offs, Pa.
func (s *Solved) BranchDiff(i int) float64 {
	id := s.Model.Branches[i].ID
	return s.Sol.Pressure[s.Built.SupplyNode[id]] - s.Sol.Pressure[s.Built.ReturnNode[id]]
}

// ValveDiff returns the differential across branch i's balancing valve, Pa
// (0 without a valve).
func (s *Solved) ValveDiff(i int) float64 {
	v := s.Model.ValveElement(i, s.State.Settings[i], s.Params.KvScale[i])
	if v == nil {
		return 0
	}
	dp, _ := v.Drop(s.Flow(i), s.Model.Fluid)
	return dp
}

// Regulates reports whether branch i's pressure-independent valve holds
// its set flow in the solved state: its differential is at or above the
// maker's hold differential, or above the one its Kv gives where that is
// higher. False for a branch without one.
func (s *Solved) Regulates(i int) bool {
	b := &s.Model.Branches[i]
	if b.PI == nil {
		return false
	}
	return s.ValveDiff(i) >= s.HoldDiff(i)
}

// HoldDiff returns the least differential at which branch i's
// pressure-independent valve holds its flow in the solved state: the
// maker's figure, or the differential at which its Kv passes its set flow
// where that is higher; NaN without one.
func (s *Solved) HoldDiff(i int) float64 {
	b := &s.Model.Branches[i]
	if b.PI == nil {
		return math.NaN()
	}
	v, err := b.PI.At(s.State.Settings[i], s.Params.KvScale[i])
	if err != nil {
		return math.NaN()
	}
	return max(b.PI.HoldDiff, v.HoldDiff(s.Model.Fluid.Density))
}

// ControlledDiff returns the differential across the span riser i's
// controller holds (its sensor's reading), Pa; ok is false without a
// controller.
func (s *Solved) ControlledDiff(i int) (float64, bool) {
	return s.Built.ControlledDiff(s.Model.Branches[i].ID, s.Sol)
}

// ControllerElement returns riser i's controller as solved; ok is false
// without one.
func (s *Solved) ControllerElement(i int) (hydraulics.DiffController, bool) {
	l, ok := s.Built.Controller[s.Model.Branches[i].ID]
	if !ok {
		return hydraulics.DiffController{}, false
	}
	c, ok := s.Built.Net.Elements(l)[0].(hydraulics.DiffController)
	return c, ok
}

// Holding reports whether riser i's controller throttles (holds its set
// point) in the solved state; false where it lies wide open or there is
// none.
func (s *Solved) Holding(i int) bool {
	c, ok := s.ControllerElement(i)
	return ok && c.Holding(s.Sol.Flow[s.Built.Controller[s.Model.Branches[i].ID]])
}

// ControllerFlow returns the flow through riser i's controller, m3/s (NaN
// without one).
func (s *Solved) ControllerFlow(i int) float64 {
	l, ok := s.Built.Controller[s.Model.Branches[i].ID]
	if !ok {
		return math.NaN()
	}
	return s.Sol.Flow[l]
}

// HeaderDiff returns the differential between the supply and return
// headers where the branches begin, Pa.
func (s *Solved) HeaderDiff() float64 {
	n := s.Built.Net
	top, ok := n.NodeIndex(network.MainOutletID)
	if !ok {
		if top, ok = n.NodeIndex(network.PumpOutletID); !ok {
			top, _ = n.NodeIndex(network.SupplyID)
		}
	}
	ret, _ := n.NodeIndex(network.ReturnID)
	return s.Sol.Pressure[top] - s.Sol.Pressure[ret]
}

// PumpDiff returns the pump's differential (the source differential without
// a pump), Pa.
func (s *Solved) PumpDiff() float64 {
	if s.Built.PumpLink >= 0 {
		// The link holds the pump and the lift it works against.
		return -s.Sol.Drop[s.Built.PumpLink] + s.Model.Lift()
	}
	return s.State.Differential
}

// Speed returns the pump's speed ratio in the solved state: the state's
// speed on a pump boundary, the speed the drive needs to hold the set point
// (at most the maximum) on a Controlled one, NaN without a pump curve.
func (s *Solved) Speed() float64 {
	m := s.Model
	switch {
	case m.Site.Boundary.Kind == site.PumpCurve && m.Pump != nil:
		return s.State.Speed
	case m.Controlled():
		if s.Saturated() {
			return m.MaxSpeed()
		}
		v := m.Set(s.Params.PumpHead, s.State.Running).SpeedFor(s.TotalFlow(), s.PumpDiff(), m.Fluid)
		if !(v <= m.MaxSpeed()) {
			return m.MaxSpeed()
		}
		return v
	}
	return math.NaN()
}

// Saturated reports whether a Controlled pump runs flat out in the solved
// state, unable to give its set point.
func (s *Solved) Saturated() bool {
	if !s.Model.Controlled() {
		return false
	}
	e, ok := s.Model.Source(s.Params, s.State).Pump.(hydraulics.ControlledPump)
	return ok && e.Saturated(s.TotalFlow(), s.Model.Fluid)
}

// TotalFlow returns the flow through the source, m3/s.
func (s *Solved) TotalFlow() float64 {
	if s.Built.PumpLink >= 0 {
		return s.Sol.Flow[s.Built.PumpLink]
	}
	var q float64
	for _, i := range s.Model.top {
		q += s.Flow(i)
	}
	return q
}

// Predict returns the model's value of reading r.
func (s *Solved) Predict(r *site.Reading) (float64, error) {
	if i, ok := s.Model.index[r.Where]; ok && r.What == site.HeaderDiff {
		// A header differential read at a branch's take-off is that
		// branch's differential.
		return s.BranchDiff(i), nil
	}
	if i, ok := s.Model.PumpIndex(r.Where); ok {
		return s.Model.PumpReading(r.What, i, s.State, s.Params.PumpHead, s.TotalFlow(), s.PumpDiff()), nil
	}
	switch r.What {
	case site.TotalFlow:
		return s.TotalFlow(), nil
	case site.PumpDiff:
		return s.PumpDiff(), nil
	case site.HeaderDiff:
		return s.HeaderDiff(), nil
	case site.Speed:
		v := s.Speed()
		if math.IsNaN(v) {
			return 0, fmt.Errorf("%s: a speed reading needs a pump curve (pump sheet) to be modelled: %w", r.Pos, ErrModel)
		}
		return v, nil
	}
	i, ok := s.Model.index[r.Where]
	if !ok {
		return 0, fmt.Errorf("%s: reading at unknown branch %q: %w", r.Pos, r.Where, ErrModel)
	}
	switch r.What {
	case site.Flow:
		return s.Flow(i), nil
	case site.BranchDiff:
		return s.BranchDiff(i), nil
	case site.ControlledDiff:
		d, ok := s.ControlledDiff(i)
		if !ok {
			return 0, fmt.Errorf("%s: controlled differential at branch %q, which has no differential controller: %w", r.Pos, r.Where, ErrModel)
		}
		return d, nil
	case site.ValveDiff:
		if !s.Model.Branches[i].HasValve() {
			return 0, fmt.Errorf("%s: valve differential at branch %q, which has no balancing valve: %w", r.Pos, r.Where, ErrModel)
		}
		return s.ValveDiff(i), nil
	}
	return 0, fmt.Errorf("%s: unknown quantity %v: %w", r.Pos, r.What, ErrModel)
}

// Top returns the branches on the main headers in take-off order.
func (m *Model) Top() []int { return append([]int(nil), m.top...) }

// StateLabels returns the survey state labels in order.
func (m *Model) StateLabels() []string {
	out := make([]string, len(m.States))
	for i, s := range m.States {
		out[i] = s.Label
	}
	return out
}

// SetUnrecorded gives the state labelled label the valve settings and pump
// of a plan it was set to: every valve whose setting no reading of the
// state, nor the moves sheet, records takes settings[i] (NaN, or a branch
// without a valve, leaves it), and the pump takes speed (a pump boundary) or differential (a
// constant-differential one) when the states sheet gives the state none and
// the value is positive. A survey state read after setting reads only a few
// branches, but every valve was set: without this its other valves would be
// taken as found. It returns how many settings it gave.
func (m *Model) SetUnrecorded(label string, settings []float64, speed, differential float64) (int, error) {
	k := slices.IndexFunc(m.States, func(st State) bool { return st.Label == label })
	if k < 0 {
		return 0, fmt.Errorf("no survey state %q: %w", label, ErrModel)
	}
	if len(settings) != len(m.Branches) {
		return 0, fmt.Errorf("%d settings for %d branches: %w", len(settings), len(m.Branches), ErrModel)
	}
	st := &m.States[k]
	recorded := make([]bool, len(m.Branches))
	for _, ri := range st.Readings {
		r := m.Site.Readings[ri]
		if i, ok := m.index[r.Where]; ok && !math.IsNaN(r.Setting) {
			recorded[i] = true
		}
	}
	for _, mv := range m.Site.Moves {
		if i, ok := m.index[mv.Branch]; ok && mv.State == label {
			recorded[i] = true
		}
	}
	var n int
	for i := range m.Branches {
		if recorded[i] || m.Branches[i].Valve == nil || math.IsNaN(settings[i]) {
			continue
		}
		st.Settings[i] = settings[i]
		n++
	}
	own := m.Site.State(label)
	switch {
	case own != nil && (own.Speed > 0 || own.SetPoint > 0):
	case m.Site.Boundary.Kind == site.PumpCurve && speed > 0:
		st.Speed = speed
	case m.Site.Boundary.Kind == site.ConstantDiff && differential > 0:
		st.Differential = differential
	}
	return n, nil
}
