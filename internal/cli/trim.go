package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"sort"
	"strings"

	"github.com/spf13/cobra"

	"flowset/internal/balance"
	"flowset/internal/calibrate"
	"flowset/internal/plant"
	"flowset/internal/report"
	"flowset/internal/site"
)

// trimOptions are trim's own: the plan the valves were set to and the
// survey state read after setting.
type trimOptions struct {
	Plan  string // plan.json written by plan or run
	State string // the as-left state; "" for the last one
	// Beyond is the fraction of the tolerance band beyond which a branch
	// is trimmed.
	Beyond float64
	// MoveUnread moves the valves of branches not read after setting on
	// the model's prediction, with the re-computed plan's pump.
	MoveUnread bool
}

func newTrimCmd(ios *IO) *cobra.Command {
	o := &runOptions{trim: &trimOptions{}}
	cmd := &cobra.Command{
		Use:   "trim SITE --plan PLAN.json",
		Short: "After setting: prove each branch in tolerance and trim those outside",
		Long: `Trim is the visit's last round. After the valves are set to a plan, read the
branches the plan's "prove it" list names, as one more survey state (its own
state label in readings.csv, its pump in states.csv). Trim fits every state
together, the valves of the new state taken at the plan's settings (PLAN.json,
written by plan or run) wherever no reading records one. A check the list
asks for (a valve moved to read its test points at a second setting, then
set back) is a state of its own, its setting in the setting column, read
before the new state; every state the plan was not made from is taken with
the plan's settings likewise. Trim says of every
branch read as left whether the readings prove it in tolerance, prove it out,
or cannot tell, and of every branch not read whether the model predicts it
in or out (its band widened by the model's own error: only a reading
proves). It then gives small setting corrections for the branches read
after setting that the readings place off target beyond a quarter of the
band (--beyond), and, with --move-unread (the default), for those not read
that the model fitted to every state puts there, with the pump of the plan
re-computed on that fit: those are predictions, marked as such, to be read
to be proven. It compares each branch as found, as the plan predicted it,
as left and after the trims. With --out it writes trim.csv (the field
sheet of the round), trim.json, report.html (the round's report: every
branch as found, as the plan predicted it and as left, what is proven and
what is only predicted, the trims and the pump correction) and the fit of
every state (calibration.csv/json, findings.csv, readings.csv).`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			o.Site = args[0]
			o.unitsSet = cmd.Flags().Changed("units")
			if o.trim.Plan == "" {
				return usagef("--plan is required: name the plan.json the valves were set to")
			}
			if b := o.trim.Beyond; !(b > 0 && b <= 1) {
				return usagef("--beyond %g: want a fraction of the tolerance band above 0 and at most 1", b)
			}
			if err := o.validate(false); err != nil {
				return err
			}
			return runMain(cmd.Context(), ios, o, loadSite)
		},
	}
	addJobFlags(cmd, o, true)
	cmd.Flags().StringVar(&o.trim.Plan, "plan", "", "plan.json of the plan the valves were set to (written by plan or run)")
	cmd.Flags().Float64Var(&o.trim.Beyond, "beyond", 0.25, "trim the branches predicted beyond this fraction of the tolerance band (0.25: outside ±2.5 % of target for ±10 %)")
	cmd.Flags().BoolVar(&o.trim.MoveUnread, "move-unread", true, "also move the valves of branches not read after setting where the model fitted to every state puts them off target, with the pump of the plan re-computed on that fit (predictions, marked as such); false: name them to be read first")
	cmd.Flags().StringVar(&o.trim.State, "state", "", "the survey state read after setting (default: the last state of readings.csv)")
	return cmd
}

// setPlan is one plan.json as trim reads it: the new settings and the pump.
type setPlan struct {
	States   []string `json:"states"`
	Branches []struct {
		ID        string   `json:"branch"`
		New       *float64 `json:"new_setting"`
		Percent   *float64 `json:"percent_of_target"`
		PlannedOn *string  `json:"planned_on"`
	} `json:"branches"`
	Pump struct {
		Boundary string   `json:"boundary"`
		Speed    *float64 `json:"speed_ratio"`
		SetPoint *float64 `json:"set_point_pa"`
	} `json:"pump"`
}

// setPlanRead is what trim takes from the plan the valves were set to.
type setPlanRead struct {
	// Settings are the new settings by model index, NaN where the plan
	// gives none; Speed and Diff the pump's (0: not given).
	Settings    []float64
	Speed, Diff float64
	// Predicted is what the plan predicted of each branch, % of target by
	// ID.
	Predicted map[string]float64
	// OffFit marks by ID the branches the plan was made on another
	// resistance than its fit's (held at design, or hedged); nil when the
	// plan does not say (one written before planned_on).
	OffFit map[string]bool
	// Surveyed are the survey states the plan was made from (lower case);
	// nil when the plan does not say (one written before states).
	Surveyed map[string]bool
}

// readSetPlan reads the plan the valves were set to, for model m.
func readSetPlan(path string, m *plant.Model) (*setPlanRead, error) {
	b, err := os.ReadFile(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, usagef("--plan %s: no such file", shown(path))
	}
	if err != nil {
		return nil, &systemError{err}
	}
	var p setPlan
	dec := json.NewDecoder(bytes.NewReader(b))
	if err := dec.Decode(&p); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			return nil, &dataError{fmt.Errorf("%s: byte %d: %v (want the plan.json written by flowset plan or run)", shown(path), se.Offset, err)}
		}
		return nil, &dataError{fmt.Errorf("%s: %v (want the plan.json written by flowset plan or run)", shown(path), err)}
	}
	if len(p.Branches) == 0 {
		return nil, &dataError{fmt.Errorf("%s: field \"branches\": no branch (want the plan.json written by flowset plan or run)", shown(path))}
	}
	out := &setPlanRead{Settings: make([]float64, len(m.Branches)), Predicted: map[string]float64{}}
	for i := range out.Settings {
		out.Settings[i] = math.NaN()
	}
	for k, br := range p.Branches {
		i, ok := m.Index(br.ID)
		if !ok {
			return nil, &dataError{fmt.Errorf("%s: branches[%d]: field \"branch\": value %q: no such branch in the site (was the plan made for another site?)", shown(path), k, br.ID)}
		}
		if br.Percent != nil {
			out.Predicted[br.ID] = *br.Percent
		}
		if br.PlannedOn != nil {
			switch *br.PlannedOn {
			case plannedOnFit, plannedOnDesign, plannedOnHedge:
			default:
				return nil, &dataError{fmt.Errorf("%s: branches[%d]: field \"planned_on\": value %q: want %q, %q or %q", shown(path), k, *br.PlannedOn, plannedOnFit, plannedOnDesign, plannedOnHedge)}
			}
			if out.OffFit == nil {
				out.OffFit = map[string]bool{}
			}
			out.OffFit[br.ID] = *br.PlannedOn != plannedOnFit
		}
		if br.New == nil || m.Branches[i].Valve == nil {
			continue
		}
		lo, hi := m.Branches[i].Valve.Range()
		if !(*br.New >= lo && *br.New <= hi) {
			return nil, &dataError{fmt.Errorf("%s: branches[%d]: field \"new_setting\": value %g: outside the valve's range %g to %g", shown(path), k, *br.New, lo, hi)}
		}
		out.Settings[i] = *br.New
	}
	for _, l := range p.States {
		if out.Surveyed == nil {
			out.Surveyed = map[string]bool{}
		}
		out.Surveyed[strings.ToLower(l)] = true
	}
	if p.Pump.Speed != nil {
		out.Speed = *p.Pump.Speed
	}
	if p.Pump.SetPoint != nil {
		out.Diff = *p.Pump.SetPoint
	}
	return out, nil
}

// leftState applies the plan the valves were set to to the as-left state,
// and to every other state the plan was not made from (a check read during
// the round: one valve moved to read its test points at a second setting,
// the rest where the plan put them), and returns the as-left state's index
// and what the plan predicted of each branch (% of target by ID).
func leftState(l *loaded, o *trimOptions) (int, *setPlanRead, error) {
	m := l.Model
	if len(m.States) < 2 {
		return 0, nil, &dataError{fmt.Errorf("%s: trim needs the readings taken after setting as a survey state of their own (a state label in readings.csv other than the as-found one); the site has %d state(s)", shown(o.Plan), len(m.States))}
	}
	k := len(m.States) - 1
	if o.State != "" {
		k = -1
		for s, st := range m.States {
			if strings.EqualFold(st.Label, o.State) {
				k = s
			}
		}
		if k < 0 {
			return 0, nil, usagef("--state %q: no such survey state (the site has %s)", o.State, strings.Join(m.StateLabels(), ", "))
		}
		if k == 0 {
			return 0, nil, usagef("--state %q is the as-found state: name the state read after setting", o.State)
		}
	}
	sp, err := readSetPlan(o.Plan, m)
	if err != nil {
		return 0, nil, err
	}
	for s, st := range m.States {
		if s == k || s > 0 && sp.Surveyed != nil && !sp.Surveyed[strings.ToLower(st.Label)] {
			if _, err := m.SetUnrecorded(st.Label, sp.Settings, sp.Speed, sp.Diff); err != nil {
				return 0, nil, &dataError{err}
			}
		}
	}
	return k, sp, nil
}

// suspectZ is the normalised residual beyond which trim doubts a reading
// taken after setting (the diagnosis's default for a suspect reading).
const suspectZ = 3

// trim works out the trims of job j for the as-left state k.
func (j *job) trim(ctx context.Context, k int) error {
	m := j.L.Model
	opt := &balance.TrimOptions{Inner: j.trimBeyond, Replan: j.moveUnread}
	if j.Cal != nil {
		opt.Uncertainty = j.uncertainty()
		opt.Hold = make([]bool, len(m.Branches))
		for i, b := range j.Cal.Branches {
			// A valve the fit found seized is not trimmed, unless its
			// test points are found reading off instead (applyTestPoints).
			opt.Hold[i] = b.Valve.Hypothesis == calibrate.HoldsOneKv && !tpOff(j.testPoints[i])
		}
	}
	j.readLeft = map[string]bool{}
	opt.Read = make([]bool, len(m.Branches))
	for _, ri := range m.States[k].Readings {
		id := j.L.Site.Readings[ri].Where
		j.readLeft[id] = true
		if i, ok := m.Index(id); ok {
			opt.Read[i] = true
		}
	}
	if j.Cal != nil {
		opt.Doubt = make([]bool, len(m.Branches))
		for _, rf := range j.Cal.Readings {
			if rf.State != m.States[k].Label || rf.Boundary || !(rf.Outlier || math.Abs(rf.Normalised) > suspectZ) {
				continue
			}
			if i, ok := m.Index(rf.Where); ok {
				opt.Doubt[i] = true
			}
		}
	}
	// The fitted multipliers (not the plan's, which hold some branches
	// at design until confirmed and lower others as a hedge: the state as
	// left is what the fit of every state says), each fitted valve at the
	// Kv the fit found it passing as left (a valve off its table or off
	// its mark passes there what no single scale of its table gives at
	// every setting). A branch the plan holds at design (found unable to
	// reach its target, far above design, on its own valve's test points
	// alone) is not trimmed on test points read again after setting: they
	// would read the same way (seen on an independent 250-branch plant: a
	// branch at 105 % read as 74 % and trimmed to 165 %). One the plan
	// hedges (planned on a resistance nearer design than the fit's) is
	// not moved on the model's word unread.
	// A branch read after setting far outside the tolerance from what the
	// plan predicted is doubted rather than trimmed in full: seen on a
	// fresh independent 100-branch plant, a branch predicted at 98.6 %
	// and read at 82.7 % under a meter reading low was trimmed from 106 %
	// to 144 %.
	if len(j.planPredicted) > 0 {
		opt.Expected = make([]float64, len(m.Branches))
		for i, b := range m.Branches {
			opt.Expected[i] = math.NaN()
			if v, ok := j.planPredicted[b.ID]; ok {
				opt.Expected[i] = v / 100
			}
		}
		opt.Surprise = min(-j.L.Site.ToleranceLow, j.L.Site.ToleranceHigh)
	}
	// held are the branches the plan holds at design; decided those whose
	// test points the readings at several settings decide, a held one
	// only when they find it off (the hold's other doubt, a valve off its
	// table, they do not settle).
	held := map[int]bool{}
	for _, id := range j.unconfirmed {
		if i, ok := m.Index(id); ok {
			held[i] = true
		}
	}
	decided := func(i int, v tpWeighed) bool { return tpOff(v) || tpRight(v) && !held[i] }
	p := j.Params.Clone()
	if j.Cal != nil {
		p = planParams(j.Cal)
		// A branch whose test points the readings at several settings
		// find reading off is as left where that explanation puts it, and
		// is trimmed on it; one they decide either way is not doubted for
		// sitting far from a prediction made before it was decided.
		for i, v := range j.testPoints {
			if tpOff(v) {
				p.Resistance[i] = j.Params.Resistance[i]
			}
			if decided(i, v) && opt.Expected != nil {
				opt.Expected[i] = math.NaN()
			}
		}
		opt.Hedged = make([]bool, len(m.Branches))
		for i := range m.Branches {
			if a, b := j.Params.Resistance[i], p.Resistance[i]; math.Abs(a-b) > 1e-9*max(a, b) {
				opt.Hedged[i] = true
			}
		}
		for i := range held {
			opt.Doubt[i] = true
		}
		// A reading far from what the plan predicted on its fit is
		// doubted; one far from what it predicted on a hedge or a hold
		// is not (under one of the explanations weighed, the branch sits
		// there). The plan says which it made (planned_on); where it does
		// not, this fit's hedges stand in. On an independent 14-branch
		// plant, the fit of both states found a restriction on test
		// points reading 20 % low that the plan's fit had set aside as
		// outliers, and a branch at 99 % was opened fully to 119 %.
		for i, b := range m.Branches {
			off, said := j.planOffFit[b.ID]
			if !said {
				off = opt.Hedged[i]
			}
			if off && opt.Expected != nil {
				opt.Expected[i] = math.NaN()
			}
		}
	}
	if j.Cal != nil {
		p = stateParams(j, p, k)
		for i, b := range j.Cal.Branches {
			mb := &m.Branches[i]
			if !b.KvFitted || mb.Valve == nil || k >= len(b.Valve.Kv) {
				continue
			}
			if v, ok := j.testPoints[i]; ok && tpOff(v) {
				// Its test points read off, the valve on its table.
				p.KvScale[i] = 1
				continue
			}
			if b.Valve.Hypothesis == calibrate.SetElsewhere {
				// Off its mark: where a new mark puts it is not known.
				opt.Hold[i] = true
			}
		}
	}
	if err := j.anchorDecided(ctx, p, opt.Uncertainty, k, opt.Read); err != nil {
		return err
	}
	left, err := j.leftRatios(ctx, p, k)
	if err != nil {
		return err
	}
	for i, v := range j.testPoints {
		undecided := v.Settings >= 2 && !tpOff(v) && !tpRight(v)
		if opt.Doubt != nil && undecided && (v.Weight >= 0.5 || !trimPays(v.Weight, v.Off, left[i])) {
			// Read at several settings, its test points are undecided,
			// and trimming it on the fit's view (its readings taken as
			// right) costs more than leaving it, in expected squared
			// departure over the two explanations (trimPays): it is not
			// trimmed on that view. So with them more likely off than not
			// (a fresh 100-branch plant: test points 92 % likely 22 % low,
			// the branch trimmed from 106 % to 142 % on the fit's
			// restriction), and so with a lesser chance where the trim
			// would open the valve far (a fresh 110-branch plant: 47 %
			// likely 18 % low, read at 89 % and opened fully: 112 -> 131 %).
			opt.Doubt[i] = true
			continue
		}
		if decided(i, v) && opt.Doubt != nil {
			// Its test points are decided on their readings at two
			// settings: read off, the model as corrected stands for them;
			// read right, one of them a little off the model (on an
			// independent 200-branch plant a branch differential at 3.1
			// sd kept a fouled branch confirmed so at 79 % from its trim)
			// does not undo what they agree on.
			opt.Doubt[i] = false
		}
	}
	if j.Cal != nil {
		// The pump read after setting, every reading of it set aside:
		// its correction would rest on the model alone (an independent
		// 15-branch plant, two branches read after setting, one through
		// test points 16 % high: the fit set aside all of the pump's
		// readings, put the pump 18 % above what it read, and the
		// correction lowered the speed 6 %, rms 2.25 -> 7.5 %).
		read, kept := 0, 0
		for _, rf := range j.Cal.Readings {
			if w := j.L.Site.Readings[rf.Index].What; rf.State != m.States[k].Label || w != site.TotalFlow && w != site.PumpDiff {
				continue
			}
			read++
			if !rf.Outlier {
				kept++
			}
		}
		opt.KeepPump = read > 0 && kept == 0
		// Nor are valves not read moved: the model they would follow
		// is the one the pump's readings disagree with.
		opt.Replan = opt.Replan && !opt.KeepPump
	}
	tp, err := balance.Trim(ctx, m, p, j.Plan, m.States[k], opt)
	if err != nil {
		return &dataError{fmt.Errorf("trim: %w", err)}
	}
	j.Trim = tp
	return nil
}

// trimPays reports whether trimming a branch to its target on its readings
// taken as right costs less, in expected squared departure, than leaving
// it, when its test points read a flow factor 1+b with probability w: left,
// it passes r of its target if they read right and r/(1+b) if not; trimmed,
// 1 and 1/(1+b), the trim scaling its flow alike under both (the square
// law, its valve's share of the branch differential unchanged: an
// approximation). Unknown figures trim.
func trimPays(w, b, r float64) bool {
	if !(w >= 0 && w <= 1) || !(b > -1) || !(r > 0) {
		return true
	}
	sq := func(x float64) float64 { return x * x }
	trim := w * sq(1/(1+b)-1)
	stay := (1-w)*sq(r-1) + w*sq(r/(1+b)-1)
	return trim < stay
}

// anchorDecided sets, in p, the multiplier of each branch read in state k
// whose test points the weighing finds reading off so that the model passes
// there what its reading as left, corrected by that error, says: the
// weighing places the branch over every state, through modelled branch
// differentials, while the reading as left is the one the trim acts on.
// The valve's drop and the branch differential are taken at the model's
// state as left (one branch moves the headers little). Its spread in u is
// then that reading's own, carried to the multiplier through the fixed
// parts' share of the branch differential (the square law): one reading
// placed it, where the weighing's spread of the multiplier over every state
// had put its band at about half that (a fresh 9-branch plant: ±5 % about
// 94 % from a reading good to ±5 % at k = 2 by itself).
func (j *job) anchorDecided(ctx context.Context, p plant.Params, u *balance.Uncertainty, k int, read []bool) error {
	m := j.L.Model
	var idx []int
	for i, v := range j.testPoints {
		if tpOff(v) && i < len(read) && read[i] {
			idx = append(idx, i)
		}
	}
	if len(idx) == 0 {
		return nil
	}
	sort.Ints(idx)
	sol, err := m.Solve(ctx, p, m.States[k])
	if err != nil {
		return &dataError{fmt.Errorf("trim: the state as left: %w", err)}
	}
	for _, i := range idx {
		b := &m.Branches[i]
		set := m.States[k].Settings[i]
		valve := m.ValveElement(i, set, p.KvScale[i])
		fixed := m.FixedElement(i, 1)
		if valve == nil || fixed == nil {
			continue
		}
		g := 1 + j.testPoints[i].Off
		var q, rel float64 // the corrected flow and its relative sd
		for _, ri := range m.States[k].Readings {
			r := &j.L.Site.Readings[ri]
			if r.Where != b.ID || r.Bypass || !(r.Value > 0) {
				continue
			}
			switch {
			case r.What == site.Flow && r.Instrument == "valve-meter":
				q, rel = r.Value/g, r.Sigma/r.Value
			case r.What == site.ValveDiff && q == 0:
				// Its differential read g² times true, through the table.
				if r1, _ := valve.Drop(1, m.Fluid); r1 > 0 {
					q, rel = math.Sqrt(r.Value/(g*g)/r1), 0.5*r.Sigma/r.Value
				}
			}
		}
		d := sol.BranchDiff(i)
		if !(q > 0) || !(d > 0) {
			continue
		}
		dv, _ := valve.Drop(q, m.Fluid)
		df, _ := fixed.Drop(q, m.Fluid)
		if r := (d - dv) / df; r > 0 {
			p.Resistance[i] = r
			if u != nil && rel > 0 {
				u.LnResistance[i], u.LnKvScale[i] = 2*rel*d/(d-dv), 0
			}
		}
	}
	return nil
}

// leftRatios is, by model index, each branch's flow over its planned target
// in survey state k on multipliers p (NaN without a target).
func (j *job) leftRatios(ctx context.Context, p plant.Params, k int) ([]float64, error) {
	m := j.L.Model
	out := make([]float64, len(m.Branches))
	for i := range out {
		out[i] = math.NaN()
	}
	undecided := false
	for _, v := range j.testPoints {
		undecided = undecided || v.Settings >= 2 && !tpOff(v) && !tpRight(v)
	}
	if j.Plan == nil || !undecided {
		// Only an undecided branch's trim weighs its state as left.
		return out, nil
	}
	sol, err := m.Solve(ctx, p, m.States[k])
	if err != nil {
		return nil, &dataError{fmt.Errorf("trim: the state as left: %w", err)}
	}
	for _, b := range j.Plan.Branches {
		if i, ok := m.Index(b.ID); ok && b.Target > 0 {
			out[i] = sol.Flow(i) / b.Target
		}
	}
	return out, nil
}

// trimTable is the round's field sheet: every branch as found, as left and
// after the trims, with the verdict, the trim and why.
func (j *job) trimTable(u display) report.Table {
	tp := j.Trim
	t := report.Table{Title: "Trim", Columns: []string{"Branch", "As found (% of target)", "Predicted by the plan (%)", "As left (% of target)", "95 % band as left (%)", "Verdict as left", "Read after setting", "Setting as left", "Trim to", "After trims (% of target)", "Note"},
		WriteIn: []string{"Done (tick)", "Initials"}}
	for _, b := range tp.Branches {
		found := "-"
		if j.Before != nil {
			found = fmt.Sprintf("%.1f", 100*j.Before.Flow(b.Index)/b.Target)
		}
		trim := ""
		if b.Trimmed {
			trim = settingText(b.New, b.Unit)
		}
		note := b.Note
		if b.Verdict == balance.Undecided && !j.readLeft[b.ID] && note == "" && !b.Trimmed {
			note = "not read after setting and its band leaves the tolerance: read it"
		}
		pred := "-"
		if v, ok := j.planPredicted[b.ID]; ok {
			pred = fmt.Sprintf("%.1f", v)
		}
		t.Rows = append(t.Rows, []string{b.ID, found, pred, fmt.Sprintf("%.1f", b.LeftPercent), fmt.Sprintf("%.1f to %.1f", b.LeftLow, b.LeftHigh),
			b.Verdict.String(), yesNo(j.readLeft[b.ID]), settingText(b.Left, b.Unit), trim, fmt.Sprintf("%.1f", b.AfterPercent), note})
	}
	return t
}

// settingText formats a valve setting with its unit ("" without a valve).
func settingText(v float64, unit string) string {
	if math.IsNaN(v) {
		return ""
	}
	return fmt.Sprintf("%.4g %s", v, unit)
}

// trimSummary is the round's outcome in a few lines.
func (j *job) trimSummary(u display) []string {
	tp := j.Trim
	n := len(tp.Branches)
	out := []string{fmt.Sprintf("As left (state %q): of %d branches, %d read and proven in tolerance, %d proven out; %d not read and predicted in tolerance, %d predicted out; %d the readings and the model cannot tell; the model puts %d of %d inside the tolerance.",
		tp.Label, n, tp.ProvenIn, tp.ProvenOut, tp.PredictedIn, tp.PredictedOut, tp.Undecided, tp.InBefore, n)}
	switch {
	case tp.PumpChanged && tp.BySpeed:
		out = append(out, fmt.Sprintf("Pump: from %s to %s.", u.speed(tp.PumpLeft), u.speed(tp.PumpNew)))
	case tp.PumpChanged && tp.FlatOut > 0:
		out = append(out, fmt.Sprintf("Pump differential set point: from %s to %s, at or a little above what the pump gives at full speed (about %s), so that it runs flat out; the trims wanted more, which only the plan's remedies can give.", u.diff(tp.PumpLeft), u.diff(tp.PumpNew), u.diff(tp.FlatOut)))
	case tp.PumpChanged:
		out = append(out, fmt.Sprintf("Pump differential set point: from %s to %s.", u.diff(tp.PumpLeft), u.diff(tp.PumpNew)))
	case tp.PumpSetAside:
		out = append(out, "Pump: leave it as it is; the fit set aside every reading of the pump in this round (its total flow and differential disagree with the rest), so a correction would rest on the model alone, and so would trims of valves not read: check those readings (the flow meter on the main, the gauge and its tappings) and read them again.")
	case tp.FlatOut > 0:
		out = append(out, fmt.Sprintf("Pump: leave it as it is; it runs at full speed and gives %s, and a higher set point would give nothing more; the trims wanted more, which only the plan's remedies can give.", u.diff(tp.FlatOut)))
	default:
		out = append(out, "Pump: leave it as it is.")
	}
	predicted := 0
	for _, b := range tp.Branches {
		if b.Predicted {
			predicted++
		}
	}
	switch {
	case tp.Trimmed == 0:
		out = append(out, "No valve needs a trim.")
	case predicted > 0:
		out = append(out, fmt.Sprintf("Trim %s (below), %d of them on branches not read after setting: those follow the model fitted to every state (the pump and headers as now fitted), a prediction to prove by reading them; the model then puts %d of %d inside the tolerance.", countOf(tp.Trimmed, "valve"), predicted, tp.InAfter, n))
	default:
		out = append(out, fmt.Sprintf("Trim %s (below); the model then puts %d of %d inside the tolerance.", countOf(tp.Trimmed, "valve"), tp.InAfter, n))
	}
	var unread []string
	for _, b := range tp.Branches {
		if b.Verdict == balance.Undecided && !j.readLeft[b.ID] {
			unread = append(unread, b.ID)
		}
	}
	if len(unread) > 0 {
		out = append(out, fmt.Sprintf("Cannot tell without a reading (not read after setting, band across the tolerance): %s.", strings.Join(unread, ", ")))
	}
	return out
}

// printTrim prints the round on the console.
func printTrim(w io.Writer, j *job) {
	u := j.opts.Units
	fmt.Fprintln(w, "Trim after setting")
	for _, l := range j.trimSummary(u) {
		wrap(w, "  ", l)
	}
	t := j.trimTable(u)
	// The console keeps the branches that need action or a reading.
	keep := t.Rows[:0:0]
	for _, r := range t.Rows {
		if v := r[5]; r[8] != "" || r[10] != "" || v != balance.ProvenIn.String() && v != balance.PredictedIn.String() {
			keep = append(keep, r)
		}
	}
	t.Rows = keep
	if len(t.Rows) > 0 {
		fmt.Fprintln(w)
		table(w, t)
	}
}

// trimJSON is trim.json: the trimmed settings in the shape of plan.json's
// branches and pump, so that what reads a plan reads a trim.
type trimJSON struct {
	Site      string           `json:"site"`
	Generated string           `json:"generated"`
	State     string           `json:"as_left_state"`
	Summary   []string         `json:"summary"`
	Pump      trimPumpJSON     `json:"pump"`
	Branches  []trimBranchJSON `json:"branches"`
}

type trimPumpJSON struct {
	Boundary   string `json:"boundary"`
	Changed    bool   `json:"changed"`
	SpeedRatio num    `json:"speed_ratio"`
	SetPoint   num    `json:"set_point_pa"`
	LeftSpeed  num    `json:"as_left_speed_ratio"`
	LeftDiff   num    `json:"as_left_differential_pa"`
	// FlatOut is what a pump holding a differential gives at full speed
	// when the correction wanted more (balance.TrimPlan.FlatOut); NaN
	// otherwise.
	FlatOut num `json:"flat_out_differential_pa"`
	// SetAside reports the pump left because the fit set aside every
	// reading of it as left (balance.TrimPlan.PumpSetAside).
	SetAside bool `json:"readings_set_aside"`
}

type trimBranchJSON struct {
	ID      string `json:"branch"`
	Valve   string `json:"valve,omitempty"`
	Unit    string `json:"setting_unit,omitempty"`
	Left    num    `json:"as_left_setting"`
	New     num    `json:"new_setting"`
	Trimmed bool   `json:"trimmed"`
	// OnModel: trimmed on the model's prediction alone (not read after
	// setting).
	OnModel   bool   `json:"trimmed_on_prediction"`
	Target    num    `json:"target_m3_s"`
	Found     num    `json:"as_found_percent"`
	Predicted num    `json:"plan_predicted_percent"`
	LeftPct   num    `json:"as_left_percent"`
	LeftLow   num    `json:"as_left_band_low_percent"`
	LeftHigh  num    `json:"as_left_band_high_percent"`
	Verdict   string `json:"verdict"`
	Read      bool   `json:"read_after_setting"`
	After     num    `json:"after_trim_percent"`
	AfterLow  num    `json:"after_trim_band_low_percent"`
	AfterHigh num    `json:"after_trim_band_high_percent"`
	Note      string `json:"note,omitempty"`
}

func (j *job) trimOut(generated string) trimJSON {
	tp := j.Trim
	out := trimJSON{Site: j.L.Site.Name, Generated: generated, State: tp.Label, Summary: j.trimSummary(siDisplay())}
	out.Pump = trimPumpJSON{Boundary: j.L.Site.Boundary.Kind.String(), Changed: tp.PumpChanged, SpeedRatio: num(math.NaN()), SetPoint: num(tp.Differential), LeftSpeed: num(math.NaN()), LeftDiff: num(math.NaN()), FlatOut: num(math.NaN())}
	if tp.FlatOut > 0 {
		out.Pump.FlatOut = num(tp.FlatOut)
	}
	out.Pump.SetAside = tp.PumpSetAside
	if tp.BySpeed {
		out.Pump.SpeedRatio, out.Pump.LeftSpeed = num(tp.Speed), num(tp.PumpLeft)
	} else {
		out.Pump.LeftDiff = num(tp.PumpLeft)
	}
	for _, b := range tp.Branches {
		found, pred := j.foundPredicted(b)
		out.Branches = append(out.Branches, trimBranchJSON{ID: b.ID, Valve: b.Valve, Unit: b.Unit, Left: num(b.Left), New: num(b.New), Trimmed: b.Trimmed, OnModel: b.Predicted,
			Target: num(b.Target), Found: num(found), Predicted: num(pred), LeftPct: num(b.LeftPercent), LeftLow: num(b.LeftLow), LeftHigh: num(b.LeftHigh),
			Verdict: b.Verdict.String(), Read: j.readLeft[b.ID], After: num(b.AfterPercent), AfterLow: num(b.AfterLow), AfterHigh: num(b.AfterHigh), Note: b.Note})
	}
	return out
}

// foundPredicted returns branch b's flow as found and as the plan predicted
// it, in % of its target; NaN where the round does not know it.
func (j *job) foundPredicted(b balance.TrimBranch) (found, pred float64) {
	found = math.NaN()
	if j.Before != nil {
		found = 100 * j.Before.Flow(b.Index) / b.Target
	}
	pred, ok := j.planPredicted[b.ID]
	if !ok {
		pred = math.NaN()
	}
	return found, pred
}

// padRows returns rows with k blank cells added to each (write-in columns).
func padRows(rows [][]string, k int) [][]string {
	out := make([][]string, len(rows))
	for i, r := range rows {
		out[i] = append(append([]string(nil), r...), make([]string, k)...)
	}
	return out
}

// trimReport is the round as the report draws it: the summary, the pump
// correction, the branches to act on in walk order and every branch as
// found, predicted and as left.
func (j *job) trimReport(u display) *report.Trim {
	tp := j.Trim
	rt := &report.Trim{State: tp.Label, Summary: j.trimSummary(u), File: "trim.csv and trim.json"}
	switch {
	case tp.BySpeed:
		rt.Pump = report.PumpStep{From: u.speed(tp.PumpLeft) + " speed", To: u.speed(tp.PumpNew) + " speed", Where: "the pump's drive speed"}
	default:
		rt.Pump = report.PumpStep{From: u.diff(tp.PumpLeft), To: u.diff(tp.PumpNew), Where: "the differential set point at " + sensorName(j.L.Site.Boundary.Sensor)}
	}
	if !tp.PumpChanged {
		rt.Pump.To += " (leave it as it is)"
	}
	if tp.FlatOut > 0 {
		rt.Pump.To += fmt.Sprintf(" (the pump at full speed: %s)", u.diff(tp.FlatOut))
	}
	if tp.PumpSetAside {
		rt.Pump.To += " (every reading of the pump in this round was set aside: check them)"
	}
	rt.Trims = report.Table{Columns: []string{"#", "Branch", "As left (% of target)", "Setting as left", "Trim to", "Then (% of target)", "Why"},
		WriteIn: []string{"Done (tick)", "Initials"}, File: "trim.csv"}
	for _, b := range tp.Branches {
		found, pred := j.foundPredicted(b)
		note := b.Note
		if b.Verdict == balance.Undecided && !j.readLeft[b.ID] && note == "" && !b.Trimmed {
			note = "not read after setting and its band leaves the tolerance: read it"
		}
		rb := report.TrimBranch{ID: b.ID, Found: found, Predicted: pred, Left: b.LeftPercent, LeftLow: b.LeftLow, LeftHigh: b.LeftHigh,
			After: b.AfterPercent, Read: j.readLeft[b.ID], Verdict: b.Verdict.String(), Proven: b.Verdict == balance.ProvenIn, Note: note}
		if b.Trimmed {
			rb.Trim = settingText(b.New, b.Unit)
		}
		rt.Branches = append(rt.Branches, rb)
		if rb.Trim == "" && note == "" {
			continue
		}
		why := note
		if why == "" {
			how := "the model fitted to every state puts it"
			if rb.Read {
				how = "read after setting, the fit puts it"
			}
			why = fmt.Sprintf("%s at %.1f %% (95 %% %.1f to %.1f)", how, b.LeftPercent, b.LeftLow, b.LeftHigh)
		}
		rt.Trims.Rows = append(rt.Trims.Rows, []string{fmt.Sprint(len(rt.Trims.Rows) + 1), b.ID, fmt.Sprintf("%.1f", b.LeftPercent),
			dashed(settingText(b.Left, b.Unit)), dashed(rb.Trim), fmt.Sprintf("%.1f", b.AfterPercent), why})
	}
	return rt
}

// dashed is s, or "-" when empty.
func dashed(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// trimReportInput is the report of the round: the job's report (the model
// fitted to every state) with the round's pages in front, its summary
// comparing as found with as left.
func (j *job) trimReportInput(ctx context.Context, generated string) (report.Input, error) {
	in, err := j.reportInput(ctx, generated)
	if err != nil {
		return in, err
	}
	u := j.opts.Units
	in.Trim = j.trimReport(u)
	n := len(j.Trim.Branches)
	in.Summary.InAfter, in.Summary.OutAfter = j.Trim.InBefore, n-j.Trim.InBefore
	in.Summary.SetpointAfter = in.Trim.Pump.From + " as left"
	// The visit and the plan's field sheet are the plan's, not the
	// round's: the round's pages replace them.
	in.Visit = report.Visit{}
	in.Plan = report.Table{}
	in.Files = "trim.csv, trim.json, calibration.csv"
	// The plan's own notes (its pump, its energy) are the re-computed
	// plan's, which the round does not ask for; the fit's stay.
	in.Summary.Notes = nil
	if j.Cal != nil && !j.Cal.Converged {
		in.Summary.Notes = append(in.Summary.Notes, fmt.Sprintf("The calibration stopped without converging (%s): treat its figures with care.", j.Cal.Status))
	}
	if w := fitWarning(j.Cal); w != "" {
		in.Summary.Notes = append(in.Summary.Notes, "Warning: "+w+".")
	}
	return in, nil
}
