package balance

import (
	"context"
	"fmt"
	"math"
	"slices"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// Verdict is what the model, fitted to every survey state, says of a
// branch's flow as left after setting.
type Verdict int

// Verdicts on a branch as left.
const (
	// Undecided: its band straddles an edge of the tolerance, so the
	// readings cannot tell whether it is in or out.
	Undecided Verdict = iota
	// ProvenIn: its whole band lies inside the tolerance.
	ProvenIn
	// ProvenOut: its whole band lies outside the tolerance.
	ProvenOut
	// PredictedIn and PredictedOut: a branch not read in the state as left
	// (TrimOptions.Read) whose band, the model's own error included, lies
	// inside or outside the tolerance. Only a reading proves: on 20
	// independent plants the bands of branches not read after setting,
	// without the model's own error, held the true flow for 803 of 1,590.
	PredictedIn
	PredictedOut
)

// String returns the verdict in a technician's words.
func (v Verdict) String() string {
	switch v {
	case ProvenIn:
		return "proven in tolerance"
	case ProvenOut:
		return "proven out of tolerance"
	case PredictedIn:
		return "predicted in tolerance (not read)"
	case PredictedOut:
		return "predicted out of tolerance (not read)"
	}
	return "cannot tell"
}

// DefaultModelSD is the sd of the model's own error of a branch's ln flow,
// beyond the multipliers' spread (Kv tables interpolated, fittings and
// headers lumped), independent between branches: on 34 independent test
// plants the plan's rms deviation was 2-4 % against 1-2 % for the
// all-knowing best while the fit's bands claimed far less.
const DefaultModelSD = 0.025

// defaultTrimInner is the fraction of the tolerance band beyond which a
// branch is trimmed: a quarter of ±10 % is ±2.5 %, about what a handwheel
// mark moves a throttled branch's flow, so a turn for less chases the
// valve's resolution (common practice, no source). It was half the band,
// trimming only branches in its outer half; on the 34 independent test
// plants (DEVELOPERS.md, "Prove and trim") trimming from a quarter lowered
// the rms deviation after the round.
const defaultTrimInner = 0.25

// TrimOptions tune Trim. A nil *TrimOptions or a zero field means the
// default.
type TrimOptions struct {
	// Uncertainty is the calibration's spread (fitted to every state, the
	// as-left one included); nil gives bands that collapse onto the
	// predictions and no branch proven either way.
	Uncertainty *Uncertainty
	// KeepPump leaves the pump as left: the fit set aside every reading
	// of it (total flow, differential) in the state as left, so a
	// correction would rest on the model alone.
	KeepPump bool
	// Inner is the fraction of the tolerance band beyond which a branch is
	// trimmed; 0 means 0.25.
	Inner float64
	// Hold marks, by model index, branches whose valve must not be
	// trimmed (one the fit found not following its handwheel: a trim
	// would not move it).
	Hold []bool
	// Doubt marks, by model index, branches whose readings as left the fit
	// doubts (set aside, or far from the model): not trimmed, but to be
	// read again another way. A flow meter that reads low in both rounds
	// looks like a branch short of flow; its own valve differential, read
	// at the same time, is what disagrees.
	Doubt []bool
	// Read marks, by model index, the branches read in the as-left state;
	// when given, only those are trimmed and the others outside the band
	// are named to be read first. nil: every branch may be trimmed.
	Read []bool
	// Replan, when set, raises the pump to that of the plan re-computed
	// on the fit of every state where that is more than the centred one,
	// and also moves the valves of the branches not read after setting
	// that the model puts beyond Inner (but put inside the tolerance as
	// left), where it puts another handwheel mark nearer their target
	// (the pump and header as now fitted move every branch): a
	// prediction, marked as such (TrimBranch.Predicted).
	Replan bool
	// Hedged marks, by model index, branches the plan was made on another
	// resistance than the fit's (held at design, or hedged, because only
	// their own valve's test points say they are off): with Replan they
	// are not moved unread, since the model's view of them is what the
	// plan did not trust.
	Hedged []bool
	// Expected is, by model index, the flow the plan predicted for each
	// branch over its target (NaN or absent where it did not, or where it
	// predicted on a resistance it did not trust), and Surprise
	// how far a branch read after setting may sit from it before its
	// reading is doubted (0: never). A branch read far from a narrow
	// prediction is as likely under a meter reading wrong in both rounds
	// as off target: it is read again another way, not trimmed in full.
	Expected []float64
	Surprise float64
	// ModelSD is the sd of the model's own error of a branch's ln flow
	// (DefaultModelSD when 0, none when negative), added to the band of
	// every branch not read as left and to every band after the trims:
	// there the flow is the model's prediction, not a reading's.
	ModelSD float64
}

// TrimPlan is the outcome of Trim: the verdict on every branch as left, the
// small setting corrections for those outside the inner band and the pump
// correction, and what the model predicts once they are made.
type TrimPlan struct {
	// Label is the as-left state's label.
	Label string
	// Branches are in walk order (see the package comment).
	Branches []TrimBranch
	// Counts of the branches by verdict as left, and of those trimmed.
	ProvenIn, ProvenOut, PredictedIn, PredictedOut, Undecided, Trimmed int
	// BySpeed reports that the pump is set by its speed (PumpLeft and
	// PumpNew are speed ratios), else by a differential (Pa).
	BySpeed bool
	// PumpLeft is the pump as left and PumpNew as corrected; PumpChanged
	// reports a correction worth making (over half a per cent).
	PumpLeft, PumpNew float64
	PumpChanged       bool
	// PumpSetAside reports the pump left as it is because the fit set
	// aside every reading of it as left (TrimOptions.KeepPump).
	PumpSetAside bool
	// FlatOut is, on a pump holding a differential, what the fitted pump
	// gives at its maximum speed when the correction wanted more (Pa; 0
	// otherwise): PumpNew is then held at most the pump head's band above
	// it, since a set point above what the pump gives changes nothing.
	FlatOut float64
	// InBefore and InAfter count the branches predicted inside the
	// tolerance as left and after the trims.
	InBefore, InAfter int
	// ToleranceLow and ToleranceHigh are the band used, as fractions of
	// target.
	ToleranceLow, ToleranceHigh float64
	// Settings and the boundary after the trims, ready for a plant.State.
	Settings     []float64
	Speed        float64
	Differential float64
}

// TrimBranch is the trim of one branch.
type TrimBranch struct {
	ID    string
	Index int // model index
	Riser bool
	// Valve and Unit name the valve model and its setting unit; empty
	// without a balancing valve.
	Valve, Unit string
	// Target flow, m3/s.
	Target float64
	// Left is the setting as left and New the setting to trim it to
	// (equal when untouched; NaN without a valve).
	Left, New float64
	Trimmed   bool
	// Predicted reports a trim of a branch not read after setting: the
	// model's prediction alone, to be read to be proven.
	Predicted bool
	// LeftPercent is the flow as left in % of target, with its 95 % band;
	// AfterPercent the same once the trims are made.
	LeftPercent, LeftLow, LeftHigh    float64
	AfterPercent, AfterLow, AfterHigh float64
	Verdict                           Verdict
	// Note says why a branch outside the band is not trimmed ("" else).
	Note string
}

// State returns the plant state after the trims.
func (t *TrimPlan) State() plant.State {
	return plant.State{Label: "trimmed", Settings: append([]float64(nil), t.Settings...), Speed: t.Speed, Differential: t.Differential}
}

// Trim works out the trims after setting. m and p are the model fitted to
// every survey state, the as-left one included; left is the as-left state
// (its settings and pump as set); plan is the plan re-computed on the same
// fit, whose targets and tolerance it takes. Each branch's flow as left is
// predicted with its band and judged against the tolerance. The pump is
// corrected, with the valves as left, to the value that brings the branches
// nearest their targets (centre), with Replan raised to the re-computed
// plan's where that is more and its index is trusted, served by that plan
// and placed short by the readings, when that differs by over half a per
// cent.
// Then, over a few passes of the whole network, every branch read after
// setting (TrimOptions.Read) that is predicted outside the inner part of the
// tolerance (Inner of it) gets the setting that gives its
// target at the differential it sees (with Read nil, every branch, if its
// 95 % band as left, about the pass's prediction, also leaves out its
// target): its valve drops that differential less
// its fixed parts' drop at target, rounded to the handwheel mark whose flow
// (square law) is nearest the target. With Replan so does every branch not
// read that the pass puts outside Inner, if the model put it inside the
// tolerance as left and the plan did not hedge it (a prediction:
// TrimBranch.Predicted). Risers are not trimmed: their sub-branches are.
// Branches held (TrimOptions.Hold), doubted (Doubt) and those whose valve
// is fully open already are left, with a note.
func Trim(ctx context.Context, m *plant.Model, p plant.Params, plan *Plan, left plant.State, opt *TrimOptions) (*TrimPlan, error) {
	if m == nil || plan == nil {
		return nil, fmt.Errorf("trim: no model or plan: %w", ErrInput)
	}
	var o TrimOptions
	if opt != nil {
		o = *opt
	}
	if o.Inner <= 0 || o.Inner > 1 {
		o.Inner = defaultTrimInner
	}
	n := len(m.Branches)
	if len(left.Settings) != n {
		return nil, fmt.Errorf("trim: %d settings for %d branches: %w", len(left.Settings), n, ErrInput)
	}
	target := make([]float64, n)
	for _, b := range plan.Branches {
		if i, ok := m.Index(b.ID); ok {
			target[i] = b.Target
		}
	}
	tp := &TrimPlan{Label: left.Label, ToleranceLow: plan.ToleranceLow, ToleranceHigh: plan.ToleranceHigh,
		BySpeed: m.Site.Boundary.Kind == site.PumpCurve && m.Pump != nil}
	in := func(r float64, f float64) bool {
		return r >= 1+f*tp.ToleranceLow-1e-9 && r <= 1+f*tp.ToleranceHigh+1e-9
	}
	k := 2.0
	if o.Uncertainty != nil && o.Uncertainty.Coverage > 0 {
		k = o.Uncertainty.Coverage
	}
	modelSD := o.ModelSD
	switch {
	case modelSD == 0:
		modelSD = DefaultModelSD
	case modelSD < 0 || !(modelSD < math.Inf(1)):
		modelSD = 0
	}
	if o.Uncertainty == nil {
		// No spread: the bands collapse onto the predictions.
		modelSD = 0
	}
	solL, err := m.Solve(ctx, p, left)
	if err != nil {
		return nil, fmt.Errorf("trim: the state as left: %w: %w", err, ErrSolve)
	}
	// reach is how far above the fitted pump's most a held set point goes
	// (see flatOut): the pump head's band.
	reach := 1.0
	if o.Uncertainty != nil && o.Uncertainty.LnPumpHead > 0 {
		reach = math.Exp(k * o.Uncertainty.LnPumpHead)
	}
	sdL, err := flowSD(m, p, o.Uncertainty, solL)
	if err != nil {
		return nil, err
	}
	// isRead reports a branch read after setting (every branch where the
	// caller does not say); leftSD is the sd of a branch's ln flow as
	// left, the model's own error added to one not read.
	isRead := func(i int) bool { return o.Read == nil || i < len(o.Read) && o.Read[i] }
	leftSD := func(i int) float64 {
		if isRead(i) {
			return sdL[i]
		}
		return math.Hypot(sdL[i], modelSD)
	}

	// The pump: with the valves as left, the speed or differential that
	// brings the branches nearest their targets (see centre), when it
	// differs by over half a per cent.
	st := plant.State{Label: "trimmed", Settings: append([]float64(nil), left.Settings...), Speed: left.Speed, Differential: left.Differential}
	tp.PumpLeft, tp.PumpNew = left.Differential, left.Differential
	if tp.BySpeed {
		tp.PumpLeft, tp.PumpNew = left.Speed, left.Speed
	}
	tp.PumpSetAside = o.KeepPump && m.Site.Boundary.Kind != site.MeasuredDiff
	if m.Site.Boundary.Kind != site.MeasuredDiff && !o.KeepPump {
		// The branches the pump centres: those inside the tolerance as
		// left, whose valves work. The others are the trims' (or cannot
		// be helped), and one far out would drag the pump after it.
		use := make([]bool, n)
		for i := range use {
			b := &m.Branches[i]
			use[i] = target[i] > 0 && !b.Riser() && !(i < len(o.Hold) && o.Hold[i]) && in(solL.Flow(i)/target[i], 1)
		}
		x, err := centre(ctx, m, p, left, target, use, tp.BySpeed)
		if err != nil {
			return nil, err
		}
		if o.Replan {
			// The valves move towards the plan re-computed on the fit of
			// every state; where that plan's index needs more than the
			// centred pump gives (headers rougher than designed starve
			// the far branches however the valves are set), the pump
			// takes its value. Never less: a pump lowered to the model's
			// least leans on every branch being modelled right (seen on
			// an independent 40-branch plant: the speed down 5 %, every
			// valve opened, rms 5.5 -> 6.8 %).
			// Nor raised for an index the fit does not trust: one whose
			// valve is held (off its table or its mark) or whose readings
			// are doubted needs what the model knows least (seen on an
			// independent 200-branch plant: a valve found seized on test
			// points reading 26 % high drove the pump 7 % up, and the
			// unread branches moved to match went 5-8 % off).
			xr := plan.Differential
			if tp.BySpeed {
				xr = plan.Speed
			}
			// Nor for an index the re-plan leaves short even so: raising
			// the pump buys part of that branch's shortfall (its
			// restriction cleared is the remedy) and moves every other
			// valve (an independent 100-branch plant: a fouled branch at
			// 4 times design, confirmed, took the speed from 95 to 100 %
			// and the 80 unread valves moved to match went 8-10 % over).
			ix, ok := m.Index(plan.Index)
			trusted := !ok || !(ix < len(o.Hold) && o.Hold[ix]) && !(ix < len(o.Doubt) && o.Doubt[ix])
			short := slices.ContainsFunc(plan.Unmet, func(s Shortfall) bool { return s.ID == plan.Index })
			// Nor for an index the readings do not place short: the
			// pump moves every branch, so the index's shortfall as left
			// must hold across its band (the top of it below the inner
			// band), not in its prediction alone (an independent
			// 10-branch plant: its index, read 7 % low through its test
			// points on one draw and fitted 3 % low, truly at 100 %,
			// took the speed up 2.5 % and seven unread valves moved to
			// match, rms 2.3 -> 2.9 %).
			placed := true
			if ok && target[ix] > 0 {
				placed = solL.Flow(ix)/target[ix]*math.Exp(k*leftSD(ix)) < 1+o.Inner*tp.ToleranceLow
			}
			if trusted && !short && placed {
				x = max(x, xr)
			}
		}
		if !tp.BySpeed && m.Controlled() {
			if x, tp.FlatOut, err = flatOut(ctx, m, p, left, x, left.Differential, reach); err != nil {
				return nil, err
			}
			if math.Abs(x/tp.PumpLeft-1) <= 0.005 && left.Differential < tp.FlatOut {
				// Within reach as left and too near its most to move:
				// the pump is not flat out as left, so nothing to say.
				tp.FlatOut = 0
			}
		}
		if math.Abs(x/tp.PumpLeft-1) > 0.005 {
			tp.PumpNew, tp.PumpChanged = x, true
			if tp.BySpeed {
				st.Speed = x
			} else {
				st.Differential = x
			}
		}
	}

	trimmed := make([]bool, n)
	note := make([]string, n)
	const passes = 8
	var sol *plant.Solved
	for pass := 0; ; pass++ {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		sol, err = m.Solve(ctx, p, st)
		if err != nil {
			return nil, fmt.Errorf("trim: %w: %w", err, ErrSolve)
		}
		if pass == passes {
			break
		}
		changed := false
		// The notes say what the last pass found: a branch put inside the
		// band by the others' trims needs none.
		clear(note)
		for i := range m.Branches {
			b := &m.Branches[i]
			if b.Valve == nil || b.Riser() || !(target[i] > 0) {
				continue
			}
			// Trimmed when it is predicted beyond the inner band. A branch
			// read after setting is trimmed on that alone: left, its
			// expected squared departure is its prediction's square plus
			// its variance; trimmed to target, that variance and the
			// mark's resolution (the inner band), so the band's width
			// does not enter. Where the caller does not say which
			// branches were read (Read nil) the band as left (about the
			// pass's prediction) must also leave out the target: a branch
			// the readings cannot place off target is read again first,
			// not turned on the model's guess. With Replan, one not read
			// is moved on the model's prediction alone when that is
			// beyond the inner band.
			r := sol.Flow(i) / target[i]
			read := isRead(i)
			placed := o.Read != nil && read || !(r*math.Exp(-k*sdL[i]) <= 1 && r*math.Exp(k*sdL[i]) >= 1)
			out := !in(r, o.Inner) && placed
			// An unread branch the model puts outside the tolerance as
			// left is read first even so: a prediction that far from what
			// the plan expected is as likely the model's error (a meter
			// biased in the survey, a valve off its table) as the
			// branch's (seen on an independent 200-branch plant: a branch
			// under a meter reading 25 % low, put at 80 %, moved to 171 %).
			// One the pump correction moves out is moved back.
			model := !read && o.Replan && !in(r, o.Inner) && in(solL.Flow(i)/target[i], 1) &&
				!(i < len(o.Hedged) && o.Hedged[i])
			if !out && !model {
				continue
			}
			if i < len(o.Hold) && o.Hold[i] {
				note[i] = "its valve does not follow its handwheel: a trim would not move it (see the findings)"
				continue
			}
			surprised := read && o.Surprise > 0 && i < len(o.Expected) &&
				math.Abs(solL.Flow(i)/target[i]-o.Expected[i]) > o.Surprise
			if i < len(o.Doubt) && o.Doubt[i] || surprised {
				note[i] = "its readings are doubted (they disagree with each other or with the model, or only its own valve's test points say it is off): read its flow another way (clamp-on) before trimming"
				if !(i < len(o.Doubt) && o.Doubt[i]) {
					note[i] = fmt.Sprintf("read after setting at %.0f %% of target where the plan predicted %.0f %%: as likely a meter reading wrong in both rounds as the branch; read its flow another way (clamp-on) before trimming", 100*solL.Flow(i)/target[i], 100*o.Expected[i])
				}
				continue
			}
			if !read && !model {
				// The model's view of a branch nobody read after setting
				// moves with every other reading: read it before turning
				// its valve.
				note[i] = "not read after setting: read it before trimming"
				continue
			}
			s, rs, err := trimSetting(m, p, sol, i, target[i])
			if err != nil {
				return nil, fmt.Errorf("trim: branch %q: %w", b.ID, err)
			}
			if math.Abs(s-st.Settings[i]) > 1e-9 && !worthMoving(r, rs) {
				// The nearest mark puts it about as far off the other way:
				// the model vouches for no gain, and the move adds the
				// valve's table error between the two marks.
				note[i] = "the next handwheel mark would put it about as far off the other way: left as it is"
				continue
			}
			if math.Abs(s-st.Settings[i]) < 1e-9 {
				if _, hi := b.Valve.Range(); s >= hi-1e-9 && sol.Flow(i) < target[i] && out {
					note[i] = "its valve is fully open already: the pump or a remedy must give it more"
				}
				continue
			}
			st.Settings[i], trimmed[i], note[i], changed = s, true, "", true
		}
		if !changed {
			break
		}
	}
	for i := range trimmed {
		// A valve trimmed in one pass and put back in a later one is
		// not trimmed.
		trimmed[i] = trimmed[i] && math.Abs(st.Settings[i]-left.Settings[i]) > 1e-9
	}
	if tp.FlatOut > 0 {
		// The trims moved the flow, and with it the pump's most at that
		// flow: the set point is held again. The pump is flat out either
		// way, so the flows do not move.
		x, flat, err := flatOut(ctx, m, p, st, st.Differential, left.Differential, reach)
		if err != nil {
			return nil, err
		}
		tp.PumpNew, tp.PumpChanged, tp.FlatOut = x, math.Abs(x/tp.PumpLeft-1) > 0.005, flat
		if !tp.PumpChanged {
			tp.PumpNew = left.Differential
			if left.Differential < flat {
				tp.FlatOut = 0
			}
		}
		st.Differential = tp.PumpNew
	}
	sdA, err := flowSD(m, p, o.Uncertainty, sol)
	if err != nil {
		return nil, err
	}
	tp.Settings, tp.Speed, tp.Differential = st.Settings, st.Speed, st.Differential
	for _, i := range walk(m) {
		b := &m.Branches[i]
		if !(target[i] > 0) {
			continue
		}
		tb := TrimBranch{ID: b.ID, Index: i, Riser: b.Riser(), Target: target[i], Left: left.Settings[i], New: st.Settings[i], Trimmed: trimmed[i], Note: note[i]}
		if tb.Trimmed && o.Read != nil && !(i < len(o.Read) && o.Read[i]) {
			tb.Predicted = true
			tb.Note = "not read after setting: trimmed on the model fitted to every state (the pump and header as now fitted); read it to prove it"
		}
		if b.ValveModel != nil {
			tb.Valve, tb.Unit = b.ValveModel.Name, b.ValveModel.Unit
		}
		read := isRead(i)
		sl, sa := leftSD(i), math.Hypot(sdA[i], modelSD)
		r := solL.Flow(i) / target[i]
		tb.LeftPercent, tb.LeftLow, tb.LeftHigh = 100*r, 100*r*math.Exp(-k*sl), 100*r*math.Exp(k*sl)
		ra := sol.Flow(i) / target[i]
		tb.AfterPercent, tb.AfterLow, tb.AfterHigh = 100*ra, 100*ra*math.Exp(-k*sa), 100*ra*math.Exp(k*sa)
		switch lo, hi := tb.LeftLow/100, tb.LeftHigh/100; {
		case o.Uncertainty != nil && in(lo, 1) && in(hi, 1) && read:
			tb.Verdict = ProvenIn
			tp.ProvenIn++
		case o.Uncertainty != nil && in(lo, 1) && in(hi, 1):
			tb.Verdict = PredictedIn
			tp.PredictedIn++
		case o.Uncertainty != nil && (hi < 1+tp.ToleranceLow || lo > 1+tp.ToleranceHigh) && read:
			tb.Verdict = ProvenOut
			tp.ProvenOut++
		case o.Uncertainty != nil && (hi < 1+tp.ToleranceLow || lo > 1+tp.ToleranceHigh):
			tb.Verdict = PredictedOut
			tp.PredictedOut++
		default:
			tp.Undecided++
		}
		if in(r, 1) {
			tp.InBefore++
		}
		if in(ra, 1) {
			tp.InAfter++
		}
		if tb.Trimmed {
			tp.Trimmed++
		}
		tp.Branches = append(tp.Branches, tb)
	}
	return tp, nil
}

// trimSetting is the setting, on a handwheel mark, that gives branch i its
// target q at the differential it sees in sol: its valve takes that
// differential less its fixed parts' drop at q. Of the marks either side,
// the one whose flow at that differential (square law) is nearer the target
// is taken; the valve opens fully when even that leaves it short. It also
// returns that flow over the target.
func trimSetting(m *plant.Model, p plant.Params, sol *plant.Solved, i int, q float64) (float64, float64, error) {
	b := &m.Branches[i]
	lo, hi := b.Valve.Range()
	d := sol.BranchDiff(i)
	var fixed float64
	if f := m.FixedElement(i, p.Resistance[i]); f != nil {
		fixed, _ = f.Drop(q, m.Fluid)
	}
	scale := p.KvScale[i]
	if !(scale > 0) {
		scale = 1
	}
	// ratio is the flow at setting s over the target, by the square law
	// at the branch's differential.
	ratio := func(s float64) float64 {
		kv, err := b.Valve.KvAt(s)
		if err != nil || !(kv > 0) {
			return math.NaN()
		}
		dv, _ := hydraulics.KvDrop(q, kv*scale, m.Fluid.Density)
		return math.Sqrt(d / (fixed + dv))
	}
	dv := d - fixed
	if !(dv > 0) {
		return hi, ratio(hi), nil
	}
	kv, err := hydraulics.KvFromDrop(q, dv, m.Fluid.Density)
	if err != nil {
		return math.NaN(), math.NaN(), err
	}
	kv /= scale
	kvLo, err := b.Valve.KvAt(lo)
	if err != nil {
		return math.NaN(), math.NaN(), err
	}
	kvHi, err := b.Valve.KvAt(hi)
	if err != nil {
		return math.NaN(), math.NaN(), err
	}
	var s float64
	switch {
	case kv >= kvHi:
		return hi, ratio(hi), nil
	case kv <= kvLo:
		s = lo
	default:
		if s, err = b.Valve.SettingFor(kv); err != nil {
			return math.NaN(), math.NaN(), err
		}
	}
	step := b.Valve.Resolution()
	down, up := mark(s, lo, hi, step, false), mark(s, lo, hi, step, true)
	rUp, rDown := ratio(up), ratio(down)
	if math.Abs(math.Log(rUp)) < math.Abs(math.Log(rDown)) {
		return up, rUp, nil
	}
	return down, rDown, nil
}

// markSpread is the share of a one-mark move's change in flow that the
// valve's table does not vouch for: the Kv at a handwheel mark is known to
// some per cent, and the difference between two marks' Kv values less well
// than either (common practice, no source).
const markSpread = 0.2

// worthMoving reports whether moving a valve from where it leaves its
// branch at r (flow over target) to a mark predicted to give rNew lowers
// the expected squared departure: the new departure plus the move's own
// uncertainty (markSpread of the change, in ln flow) must come under the
// present one. A move that swaps a departure for one about as large on the
// other side of the target gains nothing the model can vouch for (seen on
// independent plants of 50 and 300 branches: unread valves predicted at
// 96 % moved one mark to 104 % went from 97-99 % to 104-107 %).
func worthMoving(r, rNew float64) bool {
	if !(r > 0) || !(rNew > 0) {
		return true
	}
	d, dNew := math.Log(r), math.Log(rNew)
	u := markSpread * (dNew - d)
	return dNew*dNew+u*u < d*d
}

// flatOut holds a differential set point x to what the pump can give at its
// maximum speed. A set point above that changes nothing, model or plant, so
// the search in centre drifts across it to its upper end, and the trims
// then asked for set points 5-15 % above what the pump could give (seen on
// independent plants of 8-300 branches whose pump was short of head). The
// most is the fitted pump's (ControlledPump.Most, at the flow with the
// valves at at's settings) times reach, the top of its band: a set point
// the pump turns out not to reach costs nothing (it runs flat out), one
// below what it can give leaves head the trims wanted unused (an
// independent 12-branch plant whose fitted pump was 0.6 % short of the
// real one). It returns the set point, held, and the fitted most when held
// (0 when x is within reach). Where the set point as left (asLeft) is at
// or above the held value already, it is kept: lowering it changes
// nothing.
func flatOut(ctx context.Context, m *plant.Model, p plant.Params, at plant.State, x, asLeft, reach float64) (float64, float64, error) {
	st := plant.State{Label: "flat out", Settings: at.Settings, Speed: at.Speed, Differential: x}
	sol, err := m.Solve(ctx, p, st)
	if err != nil {
		return 0, 0, fmt.Errorf("trim: the pump at the corrected set point: %w: %w", err, ErrSolve)
	}
	e, ok := m.Source(p, st).Pump.(hydraulics.ControlledPump)
	if !ok {
		return x, 0, nil
	}
	// Within the drive's droop of its most, the pump is at it.
	most := e.Most(sol.TotalFlow(), m.Fluid)
	if !(most > 0) || x < most*(1-hydraulics.ControlDroop) {
		return x, 0, nil
	}
	held := min(x, most*max(reach, 1))
	if asLeft >= held {
		return asLeft, most, nil
	}
	return held, most, nil
}

// centre returns the pump speed (bySpeed) or source differential that, with
// the valves as left, brings the branches marked use nearest their targets:
// least squares in ln(q/target), by golden-section search
// between 0.85 and 1.15 times the value as left (a speed at most the
// pump's maximum). The valves keep their settings, so a pump moved this
// way leaves the trims only the branches the pump cannot centre; the
// re-computed plan's own pump is for its own settings, and moving to it
// with the valves as left moves every branch.
func centre(ctx context.Context, m *plant.Model, p plant.Params, left plant.State, target []float64, use []bool, bySpeed bool) (float64, error) {
	x0 := left.Differential
	if bySpeed {
		x0 = left.Speed
	}
	if !(x0 > 0) {
		return x0, nil
	}
	lo, hi := 0.85*x0, 1.15*x0
	if bySpeed {
		hi = min(hi, m.MaxSpeed())
	}
	if !(hi > lo) {
		return x0, nil
	}
	st := plant.State{Label: "centre", Settings: left.Settings}
	cost := func(x float64) (float64, error) {
		st.Speed, st.Differential = left.Speed, left.Differential
		if bySpeed {
			st.Speed = x
		} else {
			st.Differential = x
		}
		sol, err := m.Solve(ctx, p, st)
		if err != nil {
			return 0, fmt.Errorf("trim: centring the pump: %w: %w", err, ErrSolve)
		}
		var c float64
		for i := range target {
			if use[i] {
				d := math.Log(sol.Flow(i) / target[i])
				c += d * d
			}
		}
		return c, nil
	}
	const g = 0.6180339887498949 // golden section
	a, b := lo, hi
	c, d := b-g*(b-a), a+g*(b-a)
	fc, err := cost(c)
	if err != nil {
		return 0, err
	}
	fd, err := cost(d)
	if err != nil {
		return 0, err
	}
	for b-a > 1e-4*x0 {
		if fc < fd {
			b, d, fd = d, c, fc
			c = b - g*(b-a)
			if fc, err = cost(c); err != nil {
				return 0, err
			}
		} else {
			a, c, fc = c, d, fd
			d = a + g*(b-a)
			if fd, err = cost(d); err != nil {
				return 0, err
			}
		}
	}
	x := (a + b) / 2
	// Keep the value as left unless the centred one is clearly better.
	f0, err := cost(x0)
	if err != nil {
		return 0, err
	}
	if fx, err := cost(x); err != nil || !(fx < f0) {
		return x0, err
	}
	return x, nil
}
