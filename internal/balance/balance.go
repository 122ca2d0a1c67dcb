// Package balance computes one set of balancing-valve settings that gives
// every branch of a plant its target flow at the lowest pump head, the pump
// speed or differential set-point that then serves the circuit, the energy
// saved, and the field sheet a technician works from. Where proportional
// balancing reaches the same end by repeated passes of measuring and
// throttling, the plan gives every setting at once from the (calibrated or
// design) model.
//
// # Method
//
// The circuit is a tree: ladders of branches on supply and return headers,
// risers feeding their own ladders. That makes the calculation exact and
// O(n) in the number of branches, with no iteration:
//
//  1. Targets. Every terminal branch gets its target flow q_i (the site's
//     target or design flow, times Options.Scale, or an override); a riser
//     carries the sum of its sub-branches. Continuity then fixes the flow in
//     every header segment: in direct return a segment carries the branches
//     beyond it on both headers; in reverse return the supply segment
//     carries the branches beyond it and the return segment those before
//     it, the return leg the total. So every header drop is known, and with
//     it the loss of the path from the ladder's source connections to each
//     branch's take-offs (supply and return together).
//  2. Need. The differential a branch needs across its take-offs with its
//     valve fully open is its fixed parts (resistance multiplier applied) and
//     its open valve (Kv scale applied) at q_i, plus, for a riser, what its
//     own ladder needs, recursively. A ladder needs the largest need-plus-path
//     loss of its branches; that branch is its index, whose valve stays fully
//     open. Descending from the source through the indices gives the index
//     path; the top ladder's need is the least source differential that can
//     give every branch its target (Plan.Least).
//  3. Settings. Going back down with that differential, every branch sees
//     the source differential less its path loss; its valve absorbs the
//     surplus over its fixed parts (and, for a riser with a valve, over what
//     its ladder needs, which then gets exactly its need). The valve must
//     drop Δp_v at q_i, so Kv = KvFromDrop(q_i, Δp_v) divided by the valve's
//     Kv scale, and the setting is the characteristic's SettingFor(Kv). A
//     riser without a valve passes its surplus on to its ladder.
//  4. Pump. With a pump curve, the speed ratio s is the one at which the
//     pump (affinity laws, head multiplier applied) gives the least
//     differential at the total target flow. With a differential boundary
//     the source differential is the set-point; a controlled pump (a
//     differential boundary with a pump sheet, plant.Model.Controlled) is
//     never asked a set point above what its curve gives at its maximum
//     speed at the planned flow, and the plan reports the speed its drive
//     will run at (hydraulics.SpeedFor).
//  5. Rounding. Settings are rounded to the handwheel's resolution (marks
//     counted from the lowest setting). Nearest rounds each to the nearest
//     mark. Smart picks, per valve, the mark below or above whose flow at the
//     same branch differential (square law) lies nearest the middle of the
//     tolerance band, then re-solves and flips the valves of branches still
//     outside the band where the other mark is nearer it (a few passes).
//     The index valve stays fully open.
//  6. Re-solve. The network is solved with the rounded settings, and the
//     pump speed (or source differential) is found by a 1-D root search on
//     the full network so the index branch again gets its target. With
//     Smart rounding, when branches are still outside the band the pump is
//     also tried raised until the lowest reaches the band's lower edge, and
//     lowered until the highest reaches its upper edge; a move is kept only
//     if it brings more branches into the band (a warning says so). The
//     flows reported are those of this solve. If rounding alone takes the
//     speed (or set point) past what the pump gives, the plan runs it flat
//     out and says so.
//  7. Remedies. Each branch whose resistance multiplier exceeds 1.5, and
//     the valve of a starved or index branch, is tried put right (the
//     multiplier back to 1, or a valve of twice the Kv), exactly: the
//     targets fix every header flow, so only the chains through the branch
//     fall, by the drop cured. It gives the least differential for every
//     target before and after, the
//     branch's own chain, and the pump power and energy the difference is
//     worth at the target flow. Those that save over 1 % (or let a starved
//     branch be served) head the plan (Plan.Remedies, Summary), with a
//     smaller valve where the fitted one cannot throttle to its target and
//     a valve where a branch has none and differential to spare; the
//     settings are for the plant as it stands.
//
// # A pump short of head
//
// When the least differential exceeds what the pump gives at its maximum
// speed at the total target flow (PumpPlan.Short, with Needed and
// Available), the pump runs flat out (a controlled pump's set point is what
// it then gives) and the shortfall is shared out by Options.Share:
//
//   - DesignFirst (the default): a branch whose chain — its own parts and
//     open valve, its path along the headers, and the parts, open valves
//     and paths of the risers above it — needs more than the source
//     differential D at its target is starved: its valve (and those of the
//     risers above it) is fully open and it takes the flow at which its
//     chain needs exactly D; every other branch is set for its target. The
//     circuit's flow Q(D) rises with D and the pump's P(Q) falls with Q, so
//     D = P(Q(D)) is found by regula falsi, each Q(D) by a per-branch
//     Newton iteration in ln q (starve). A technician is never told to
//     throttle every branch to 80 % because one is fouled: the fault stays
//     where it is, with its remedy, and the rest of the plant gets design.
//   - Proportional: every valve is set as if the pump could serve every
//     target; at the pump's maximum all flows fall short by about the same
//     fraction (a balanced circuit scales together).
//
// The tolerance band (Site.ToleranceLow/High, ±10 % when not given) is
// applied to each branch's target, which is its design flow unless a target
// or Scale says otherwise. The many solves of steps 5-6 share one network:
// changed valves and the pump are swapped in place and Newton's method starts
// from the last flows (the first time from the target flows), which gives
// what plant.Solve gives at a fraction of the cost.
//
// Because every quantity is computed from the same element laws the network
// solver uses, solving with the unrounded settings at the computed speed
// returns the targets to the solver's tolerance (tested).
//
// # Quantities reported
//
// The valve differential at the new setting and planned flow is the check
// reading at the valve's test points, valid once every valve is set and the
// pump runs as planned. The authority is Δp_valve / Δp_branch at the plan:
// the drop across the valve at its set position over the differential
// across the branch take-offs — the form N = Δp_v / Δp_v,closed of
// shared/references.md §3.5 (the closed valve sees the whole branch
// differential), evaluated at the set position rather than fully open, which
// is what a regulating valve that is not a control valve works at. For a
// riser the branch differential includes its sub-circuit.
//
// Energy: hydraulic power is flow times pump (source) differential, before
// (as-found settings at the present speed or set-point) and after; electrical
// power divides by the pump and motor efficiencies of the site sheet, both
// held constant between the two duty points (stated in the plan's
// assumptions; approximate).
//
// Uncertainty: given standard deviations of the calibrated log-multipliers,
// the band of each predicted flow is the linearised propagation through the
// whole network (implicit-function sensitivities of the final solve, so
// header and pump interactions are included), parameters taken as
// independent, pump speed (or source differential) held at the plan:
// σ²(ln q_i) = Σ_j (∂ln q_i/∂ln θ_j)² σ_j², band = predicted × exp(±k σ) with
// k = Uncertainty.Coverage (2 by default, about 95 % for a normal ln q). The
// plan also works out, exactly, the least differential if any one poorly
// known resistance (or valve Kv, or the header) sat at the end of its band
// (Plan.LeastHigh) and warns by name about those that would raise it by
// more than 2 %: a branch the survey did not pin down may be the true index.
//
// # Walk order
//
// Branches are listed in the order a technician walks: take-off order along
// the headers, and the sub-branches of a riser before the riser itself
// (depth first, post-order). Setting the terminals of a riser and then its
// valve on the way back to the main header keeps each riser one visit; since
// every setting comes from the plan, the order does not change the result.
package balance

import (
	"errors"
	"math"

	"flowset/internal/plant"
	"flowset/internal/site"
)

// Sentinel causes wrapped by the errors of this package.
var (
	// ErrInput: the options, targets or multipliers are not usable.
	ErrInput = errors.New("invalid balancing input")
	// ErrSolve: the network could not be solved for the plan.
	ErrSolve = errors.New("cannot solve plan")
)

// RoundMode is how exact settings are moved to the handwheel's marks.
type RoundMode int

// Rounding modes.
const (
	// Nearest rounds each setting to its nearest mark.
	Nearest RoundMode = iota
	// Smart chooses the mark below or above per valve to keep every branch
	// inside the tolerance band, re-solving the network between passes.
	Smart
)

// String returns the mode's name.
func (r RoundMode) String() string {
	switch r {
	case Nearest:
		return "nearest"
	case Smart:
		return "smart"
	}
	return "round(?)"
}

// Share is how a plan shares out a pump that cannot give every target.
type Share int

// Share-out policies.
const (
	// DesignFirst gives every branch that can reach its target its target
	// and opens fully the valves of those that cannot: a shortfall stays
	// where its cause is, and the remedies say what would cure it.
	DesignFirst Share = iota
	// Proportional sets every valve as if the pump could serve every
	// target, so all branches fall short by about the same fraction (the
	// proportionality of a balanced circuit).
	Proportional
)

// String returns the policy's name as the command line spells it.
func (s Share) String() string {
	switch s {
	case DesignFirst:
		return "design-first"
	case Proportional:
		return "proportional"
	}
	return "share(?)"
}

// Options tunes Compute. A nil *Options or a zero field means the default.
type Options struct {
	// Scale multiplies every branch's target (the site's target or design
	// flow); 0 means 1.
	Scale float64
	// Targets overrides the target of terminal branches, m3/s, by ID.
	Targets map[string]float64
	// Rounding is the rounding mode; the zero value is Nearest.
	Rounding RoundMode
	// Share is how a pump short of head is shared out; the zero value is
	// DesignFirst.
	Share Share
	// Uncertainty gives the calibration's spread, for the band of each
	// predicted flow; nil for none.
	Uncertainty *Uncertainty
	// MinValveDiff overrides every valve model's smallest reliable
	// differential, Pa; 0 uses the model's (3 kPa when it has none).
	MinValveDiff float64
	// ModelSD is the sd of the model's own error of a branch's ln flow,
	// added to the band of every predicted flow; 0 means DefaultModelSD,
	// a negative value none. Without it the plan's bands held the flow the
	// plan gave on 70 independent plants for 2,760 of 6,033 branches.
	ModelSD float64
	// Workers bounds the goroutines the plan's sensitivity solves run on
	// side by side; 0 means runtime.GOMAXPROCS(0), 1 one after another.
	// The plan is the same bit for bit whatever it is.
	Workers int
	// bandExactMax, when not 0, replaces bandExactMax (tests compare
	// both ways of computing the band on one site).
	bandExactMax int
}

// Uncertainty is the spread of the calibrated multipliers: standard
// deviations of their natural logarithms (0 where a parameter is known).
type Uncertainty struct {
	LnResistance []float64 // per branch, of the resistance multiplier
	LnKvScale    []float64 // per branch, of the valve's Kv scale
	LnHeader     float64   // of the header multiplier
	LnPumpHead   float64   // of the pump head multiplier
	// Coverage is the number of standard deviations each side of the band;
	// 0 means 2.
	Coverage float64
}

// Plan is a balancing plan.
type Plan struct {
	// DesignOnly is set by the caller when the plan was computed from the
	// design model, not a calibrated one; the field sheet then says so.
	DesignOnly bool
	Rounding   RoundMode
	Share      Share
	// Index is the index branch (a terminal branch), IndexPath the branches
	// from the main header down to it (risers first).
	Index     string
	IndexPath []string
	// Least is the least source differential that gives every branch its
	// target with exact settings, Pa; Required the source differential of
	// the plan with rounded settings, Pa (both at the pump, or across the
	// source connections without one).
	Least, Required float64
	// LeastHigh is the least source differential if the one parameter that
	// matters most sat at the end of its uncertainty band (Least without an
	// Uncertainty); the warnings name the parameters behind it.
	LeastHigh float64
	// TotalFlow is the planned flow through the source, m3/s.
	TotalFlow float64
	Pump      PumpPlan
	// Branches are in walk order (see the package comment).
	Branches []BranchPlan
	// Remedies are the faults valves cannot set right, with what putting
	// each right would give, most saving first; the plan's settings are
	// for the plant as it stands.
	Remedies []Remedy
	// LeastRemedied is the least source differential with every Restore
	// remedy carried out together, Pa (NaN with fewer than two).
	LeastRemedied float64
	Unmet         []Shortfall
	Warnings      []string
	// ToleranceLow and ToleranceHigh are the band used, as fractions of
	// target (-0.1, +0.1 for ±10 %).
	ToleranceLow, ToleranceHigh float64
	// Settings are the new settings by model branch index (NaN without a
	// valve), ready for a plant.State; Speed and Differential the boundary
	// of the plan (Speed 0 without a pump curve).
	Settings     []float64
	Speed        float64
	Differential float64
	// SetPoints are the differential controllers' new set points by model
	// branch index (NaN without one), nil when the site has none; the
	// plan of each is in Controllers, in walk order.
	SetPoints   []float64
	Controllers []ControllerPlan
	// Banded reports whether the uncertainty bands come from an
	// Uncertainty; without one they collapse onto the prediction.
	Banded bool
	// Needs are, by model branch index, what each branch's chain needs at
	// its target with its valve (and those above it) fully open.
	Needs []Need
}

// Need is what one branch's chain needs at its target, Pa, friction only
// (an open circuit's lift not included): Chain is the source differential
// (the largest over all branches is Plan.Least less the lift), Fixed the
// drop of the branch's own fixed parts and OpenValve that of its fully
// open valve (0 without one); the rest of Chain is the header path and
// the risers above it.
type Need struct {
	Chain, Fixed, OpenValve float64
}

// OperatingPoint is a pump's duty.
type OperatingPoint struct {
	Flow         float64 // m3/s
	Differential float64 // Pa
	Head         float64 // m of the circulated liquid
	Speed        float64 // ratio to nominal; 0 without a pump curve
}

// PumpPlan is what the plan asks of the pump and what it saves.
type PumpPlan struct {
	Boundary site.BoundaryKind
	// HaveBefore reports whether the before figures could be worked out.
	HaveBefore    bool
	Before, After OperatingPoint
	// SpeedRatio is the speed to run at (a pump boundary), or the speed a
	// controlled pump's drive will run at to hold the set point; NaN
	// without a pump curve. NeededSpeed is the speed every target needs
	// (above MaxSpeed when the pump falls short).
	SpeedRatio, NeededSpeed, MaxSpeed float64
	// Needed is the least source differential that serves every target
	// (Plan.Least) and Available what the pump gives at their total flow
	// at its maximum speed, Pa (+Inf without a pump curve: an ideal
	// source). Short reports that Needed exceeds Available: the pump runs
	// flat out and the plan shares the shortfall out (Options.Share).
	Needed, Available float64
	Short             bool
	// TrimRatio is the impeller diameter ratio that would give the planned
	// duty at nominal speed (a fixed-speed alternative; approximate); NaN
	// when not applicable.
	TrimRatio float64
	// Sensor and SetPoint: the differential a controller should hold at its
	// sensor ("pump", or a branch ID) for the plan, Pa.
	Sensor   string
	SetPoint float64
	// Powers in W.
	HydraulicBefore, HydraulicAfter   float64
	ElectricalBefore, ElectricalAfter float64
	// AnnualEnergySaving is in kWh per year (negative when the plan uses
	// more); AnnualCostSaving in Currency, NaN without an energy price.
	AnnualEnergySaving float64
	AnnualCostSaving   float64
	Currency           string
	Assumptions        []string

	// Several pumps. Pumps is the number on the pump sheet (0 without a
	// pump curve), Running how many the plan runs (the site's pumps
	// running), Series whether they run in series. Duties is each running
	// pump's share of the planned duty; nil for one pump.
	Pumps, Running int
	Series         bool
	Duties         []plant.PumpDuty
	// Fewer is the planned duty with one pump fewer running in parallel,
	// nil where there is none to spare (one running, or in series).
	Fewer *PumpOption
}

// PumpOption is the plan's duty (its flow and pump differential, so every
// branch gets the same flow) given by another number of pumps.
type PumpOption struct {
	Running int
	// Serves reports whether these pumps give the duty at the drive's
	// maximum speed; Available is their differential at the planned flow
	// flat out, Pa (lift included).
	Serves    bool
	Available float64
	// Speed is the speed ratio they need for the duty; Duties, Electrical
	// (W) and AnnualEnergySaving (kWh per year against the plan's pumps;
	// NaN without running hours) are theirs at it. All NaN or nil where
	// they do not serve.
	Speed              float64
	Duties             []plant.PumpDuty
	Electrical         float64
	AnnualEnergySaving float64
	// Where they do not serve, FlatOutInBand of FlatOutBranches branches
	// with a target are still inside the tolerance band with these pumps
	// flat out and the plan's settings, and FlatOutLowest is the lowest
	// flow as % of target (NaN, zeros when not worked out).
	FlatOutInBand, FlatOutBranches int
	FlatOutLowest                  float64
}

// BranchPlan is the plan for one branch.
type BranchPlan struct {
	ID, Parent string
	Depth      int  // 0 on the main headers
	Riser      bool // feeds sub-branches
	OnIndex    bool // on the index path (valve fully open)
	// Held reports a pressure-independent valve: set for its flow, never
	// left fully open for being the index.
	Held bool
	// Valve is the valve model's name and Unit its setting unit; both empty
	// without a balancing valve.
	Valve, Unit string
	// Current is the as-found setting, Exact the unrounded plan and New the
	// rounded setting to set; NaN without a valve.
	Current, Exact, New float64
	// KvRequired is the flow coefficient the valve's table must give for the
	// exact plan (m3/h at 1 bar, before any Kv scale); NaN without a valve.
	KvRequired float64
	// Target, Design and Predicted flows, m3/s; Predicted is from the
	// network re-solved with the rounded settings.
	Target, Design, Predicted float64
	// Percent is Predicted as % of Target, PercentDesign as % of Design.
	Percent, PercentDesign float64
	// BandLow and BandHigh bound Percent under the calibration's
	// uncertainty (equal to Percent without one).
	BandLow, BandHigh            float64
	InTolerance, BandInTolerance bool
	// ValveDiff is the differential across the valve at the new setting and
	// predicted flow, Pa: the check reading at its test points.
	ValveDiff float64
	// BranchDiff is the differential across the branch's take-offs, Pa.
	BranchDiff float64
	// Authority is ValveDiff / BranchDiff (NaN without a valve).
	Authority float64
	Notes     []string
	// Bypass is a three-port terminal's bypass valve model ("" for none)
	// and BypassUnit its setting unit; BypassNow is its as-found setting,
	// BypassNew the setting to set and BypassKv the Kv it needs: at the
	// target flow the bypass valve drops what the coil drops, so full
	// bypass passes the same flow as full coil flow (common practice, no
	// source). BypassShort: even fully open it drops more (the bypass
	// then passes less). BypassDiff is the bypass valve's drop at the
	// target flow at BypassNew, Pa: its check reading at full bypass.
	Bypass, BypassUnit             string
	BypassNow, BypassNew, BypassKv float64
	BypassDiff                     float64
	BypassShort                    bool
}

// ControllerPlan is the plan for one riser's differential controller. The
// set point is the least that serves the index branch of its span with the
// span's partner valve fully open, so the settings inside the span depend
// on nothing outside it; the source then only has to give every
// controller its set point plus its valve's wide-open drop.
type ControllerPlan struct {
	ID string
	// Current is the as-found set point, SetPoint the new one and Least
	// what the span needs at its targets, Pa; Min and Max the
	// controller's range (0 and +Inf when not given).
	Current, SetPoint, Least, Min, Max float64
	// OpenDrop is the controller valve's wide-open drop at the riser's
	// target flow, Pa; Throttle the drop it takes above that at the plan.
	OpenDrop, Throttle float64
	// Span is the predicted differential across the span (what its sensor
	// reads) and Holding whether the controller throttles at the plan.
	Span    float64
	Holding bool
	Notes   []string
}

// Shortfall is a branch the plan cannot bring into its tolerance band.
type Shortfall struct {
	ID        string
	Target    float64 // m3/s
	Predicted float64 // m3/s
	Percent   float64 // % of target
	Reason    string
	// Needs is the source differential its chain needs at target, Pa.
	Needs float64
	// Remedy is what would cure it ("" when the plan knows none); Saves
	// the source differential the remedy saves, Pa, and AnnualEnergy the
	// energy, kWh a year (NaN when not worked out).
	Remedy              string
	Saves, AnnualEnergy float64
}

// RemedyKind is what a remedy does.
type RemedyKind int

// Remedy kinds.
const (
	// Restore brings a branch whose resistance is well above design
	// (fouled, or a strainer, isolating valve or coil partly blocked) back
	// to design.
	Restore RemedyKind = iota
	// LargerValve fits a valve of twice the Kv where the open valve takes
	// much of what a branch needs.
	LargerValve
	// LargerPump is a pump, or a drive allowed a higher speed, that gives
	// the least differential at the target flow.
	LargerPump
	// SmallerValve fits a valve whose lowest setting passes no more than
	// the target where the fitted one, fully throttled, passes more.
	SmallerValve
	// FitValve fits a balancing valve on a branch that has none and runs
	// above its target.
	FitValve
)

// String returns the kind's name.
func (k RemedyKind) String() string {
	switch k {
	case Restore:
		return "restore"
	case LargerValve:
		return "larger-valve"
	case LargerPump:
		return "larger-pump"
	case SmallerValve:
		return "smaller-valve"
	case FitValve:
		return "fit-valve"
	}
	return "remedy(?)"
}

// Remedy is a fault the valves cannot set right and what putting it right
// would give.
type Remedy struct {
	// ID is the branch ("" for the pump).
	ID   string
	Kind RemedyKind
	// Action says what to do, in a technician's words.
	Action string
	// Ratio is the branch's resistance multiplier (Restore), else NaN.
	Ratio float64
	// Need and NeedAfter are the source differentials the branch's chain
	// needs at its target before and after the remedy, Pa.
	Need, NeedAfter float64
	// Least and LeastAfter are the least source differentials that serve
	// every target before and after, Pa; Saves is their difference.
	Least, LeastAfter, Saves float64
	// Power is the electrical power Saves is worth at the total target
	// flow, W, and AnnualEnergy that over the running hours, kWh (NaN
	// without running hours).
	Power, AnnualEnergy float64
	// Starved reports that the branch (or one below it) falls short of
	// its target without the remedy; Serves that after it the pump gives
	// every target.
	Starved, Serves bool
}

// State returns the plant state of the plan: its settings and boundary.
func (p *Plan) State() plant.State {
	return plant.State{Label: "plan", Settings: append([]float64(nil), p.Settings...), Speed: p.Speed, Differential: p.Differential,
		SetPoints: append([]float64(nil), p.SetPoints...)}
}

// InTolerance returns how many branches the plan predicts inside the band.
func (p *Plan) InTolerance() int {
	var n int
	for _, b := range p.Branches {
		if b.InTolerance {
			n++
		}
	}
	return n
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
