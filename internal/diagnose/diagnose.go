// Package diagnose turns a calibrated model's evidence into findings a
// technician can act on: which branches are restricted or unexpectedly free,
// which valves do not behave as their tables, which readings look wrong,
// which branches cannot reach design flow, and which the survey leaves
// undetermined. Each finding carries its evidence and a confidence.
//
// The package does no numerics beyond turning fitted intervals into
// probabilities; callers gather the evidence from the calibration and the
// plant model.
package diagnose

import (
	"fmt"
	"math"
	"sort"
)

// Code identifies a kind of finding. Codes are stable: new ones are only
// ever appended.
type Code int

// The kinds of finding.
const (
	Restricted        Code = iota + 1 // resistance well above design
	Free                              // resistance well below design
	ValveStuck                        // valve held one Kv while its setting was changed
	ValveMisSet                       // valve sits elsewhere than its recorded setting
	SuspectReading                    // reading far from the fitted model
	CannotReachDesign                 // short of design even with its valve fully open
	Undetermined                      // the survey does not pin the branch down
	ValveStarved                      // a pressure-independent valve below its hold differential
	ValveOffFlow                      // a pressure-independent valve's setting does not give its flow
	ControllerOpen                    // a differential controller lies wide open, not holding
	ControllerOffSet                  // a differential controller's span does not read its set point
)

var codeNames = [...]string{"", "restricted", "free", "valve-stuck", "valve-mis-set", "suspect-reading", "cannot-reach-design", "undetermined",
	"valve-starved", "valve-off-flow", "controller-wide-open", "controller-off-set-point"}

func (c Code) String() string {
	if c > 0 && int(c) < len(codeNames) {
		return codeNames[c]
	}
	return fmt.Sprintf("code(%d)", int(c))
}

// Severity orders findings for the report.
type Severity int

// Severities.
const (
	Info Severity = iota
	Warning
	Fault
)

func (s Severity) String() string {
	return [...]string{"info", "warning", "fault"}[s]
}

// Thresholds are the limits behind the flags. The zero value means the
// defaults of DefaultThresholds.
type Thresholds struct {
	// Restricted is the resistance ratio (fitted over design) above which a
	// branch is called restricted. Default 1.5: by the square law a branch
	// at constant differential then passes 1/sqrt(1.5) = 82 % of its flow,
	// well outside a ±10 % band (the band is common practice; see the site
	// help). The same ratio inverted (0.67) defines Free.
	Restricted float64
	// Confidence is the posterior probability a ratio must have of lying
	// beyond its threshold to raise the flag. Default 0.95.
	Confidence float64
	// SuspectZ is the normalised residual above which a reading is suspect.
	// Default 3 (a 3-sigma rule, common practice).
	SuspectZ float64
	// ShortFraction is how far below target (as a fraction) the open-valve
	// flow must be to say a branch cannot reach design. Default 0.10,
	// matching the usual lower tolerance.
	ShortFraction float64
	// ScatterRatio and ExtraDrop flag a branch by its part even when its
	// ratio stays under Restricted: a fouled pipe or strainer in a branch
	// dominated by its coil adds kilopascals but only a few tens of per cent
	// to the whole branch. The readings alone (Branch.DataLn, DataSD) must
	// show, with probability Confidence, the resistance above ScatterRatio
	// times design and the extra drop at design flow above ExtraDrop.
	// ScatterRatio default 1.2: two standard deviations of a clean branch's
	// departure from its design estimate (calibrate.DefaultPriorClean).
	// ExtraDrop default 3 kPa: about what a clean strainer or a fully open
	// isolating valve drops at design flow, so more is worth a look
	// (common practice, no source). Mirrored for Free.
	ScatterRatio float64
	ExtraDrop    float64
}

// DefaultThresholds returns the documented defaults.
func DefaultThresholds() Thresholds {
	return Thresholds{Restricted: 1.5, Confidence: 0.95, SuspectZ: 3, ShortFraction: 0.10, ScatterRatio: 1.2, ExtraDrop: 3000}
}

func (t Thresholds) withDefaults() Thresholds {
	d := DefaultThresholds()
	if t.Restricted > 1 {
		d.Restricted = t.Restricted
	}
	if t.Confidence > 0 && t.Confidence < 1 {
		d.Confidence = t.Confidence
	}
	if t.SuspectZ > 0 {
		d.SuspectZ = t.SuspectZ
	}
	if t.ShortFraction > 0 && t.ShortFraction < 1 {
		d.ShortFraction = t.ShortFraction
	}
	if t.ScatterRatio > 1 {
		d.ScatterRatio = t.ScatterRatio
	}
	if t.ExtraDrop > 0 {
		d.ExtraDrop = t.ExtraDrop
	}
	return d
}

// Branch is the evidence about one branch.
type Branch struct {
	ID string
	// Ratio is the fitted resistance over design, with the standard
	// deviation of its logarithm (posterior, normal in log space).
	Ratio, LogSD float64
	Determined   bool
	// FaultProb is the calibration's probability that the branch departs
	// from design by a fault rather than a clean branch's scatter (NaN when
	// not worked out); DataLn and DataSD what the readings alone say of ln
	// Ratio (NaN unknown); DesignDrop the drop of its fixed parts (pipe,
	// fittings, terminal) at design flow as designed, Pa (NaN unknown).
	FaultProb, DataLn, DataSD, DesignDrop float64
	// Valve holds the valve hypothesis test, when one was made.
	Valve *Valve
	// Target is the flow to reach; OpenFlow what the calibrated model gives
	// with the branch's valve fully open at the present pump (NaN if not
	// computed).
	Target, OpenFlow float64
	// Measured lists what the branch was measured with, in words, to
	// suggest the reading that would pin it down.
	Measured []string
	HasFlow  bool // an independent flow reading exists
	HasValve bool // the branch has a balancing valve
	// TestPoints reports that its balancing valve's test points were read
	// (a flow by valve meter or the valve's differential).
	TestPoints bool
	// Held is the evidence about the branch's pressure-independent valve;
	// nil for none.
	Held *Held
}

// Held is the evidence about a pressure-independent valve from the fit.
type Held struct {
	// Regulates reports that it held its set flow in every survey state,
	// so the branch's resistance could not be told from the readings.
	Regulates bool
	// Starved lists the states in which it saw less than its hold
	// differential.
	Starved []HeldState
	// Scale is the fitted flow its setting gives over its table's, with
	// its 95 % interval; Fitted and Determined as for a resistance.
	Scale, Lo, Hi      float64
	Fitted, Determined bool
	Unit               string // flow unit of the evidence text, e.g. "l/s"
	PerSI              float64
}

// HeldState is a pressure-independent valve in one survey state.
type HeldState struct {
	State                              string
	ValveDiff, HoldDiff, Flow, SetFlow float64 // Pa, Pa, m3/s, m3/s
}

// Valve is the outcome of comparing hypotheses about a valve.
type Valve struct {
	Hypothesis string  // "follows its table", "holds one Kv", "set elsewhere"
	DeltaChi2  float64 // improvement of chi-square over "follows its table"
	Recorded   float64 // setting recorded on the sheets
	Implied    float64 // setting the data imply (NaN if none)
	Unit       string
	// Assumed marks "set elsewhere" taken on the prior, the readings
	// not telling it from the valve's table: read at its test points
	// alone, its branch would be TableRatio times its design resistance
	// with the valve on its table, far freer than any fault makes it.
	Assumed    bool
	TableRatio float64
}

// Reading is the evidence about one reading.
type Reading struct {
	Label      string // where it came from, e.g. "readings.csv:12"
	Where      string // branch ID, pump or header
	What       string // the quantity in words
	Normalised float64
	Outlier    bool // removed by the fit's outlier test
	// Why is the fit's explanation: what was read against what the model
	// needs, and what the other readings at the place point to ("" none).
	Why string
}

// Finding is one flag with its evidence.
type Finding struct {
	Code       Code
	Severity   Severity
	Branch     string // "" for a finding about a reading at the pump or header
	Reading    string // label of the reading concerned, if any
	Message    string // what is wrong and the likely cause
	Evidence   string // the numbers behind it
	Confidence float64
	Action     string // what to do about it
}

// Check returns the findings, most severe first, then by branch order.
func Check(branches []Branch, readings []Reading, t Thresholds) []Finding {
	t = t.withDefaults()
	var out []Finding
	lnThr := math.Log(t.Restricted)
	for _, b := range branches {
		out = append(out, held(b, t)...)
		if h := b.Held; h != nil && h.Regulates && !b.Determined {
			out = append(out, Finding{Code: Undetermined, Severity: Info, Branch: b.ID,
				Message: "its pressure-independent valve held its flow in every survey state, so the readings cannot tell this branch's resistance " +
					"(it is not identifiable while the valve regulates); the model keeps it at design",
				Evidence: fmt.Sprintf("the valve saw at least its hold differential in every state; measured with: %s", list(b.Measured)),
				Action:   "to learn it, turn the pump down until the valve is starved and read the flow and the branch differential, or read the differential across the terminal"})
		} else if !b.Determined {
			out = append(out, Finding{Code: Undetermined, Severity: Info, Branch: b.ID,
				Message:  "the survey does not determine this branch's resistance; the model keeps it near design",
				Evidence: fmt.Sprintf("posterior sd of the resistance ratio's logarithm %.2f; measured with: %s", b.LogSD, list(b.Measured)),
				Action:   suggestReading(b)})
		}
		if b.LogSD > 0 && b.Ratio > 0 {
			x := math.Log(b.Ratio)
			extra := (b.Ratio - 1) * b.DesignDrop
			up, down := byPart(b, t)
			if p := normalCDF((x - lnThr) / b.LogSD); p < t.Confidence && up >= t.Confidence {
				out = append(out, Finding{Code: Restricted, Severity: Fault, Branch: b.ID, Confidence: up,
					Message:  "pressure drop above design: a fouled strainer, pipe or coil, or a partly closed isolating valve",
					Evidence: fmt.Sprintf("about %.1f kPa more than designed at design flow (resistance %.2f x design, 95 %% interval %.2f-%.2f)", extra/1000, b.Ratio, b.Ratio*math.Exp(-1.96*b.LogSD), b.Ratio*math.Exp(1.96*b.LogSD)),
					Action:   "check strainers, isolating valves and the terminal for fouling before setting the valve"})
			} else if p >= t.Confidence {
				out = append(out, Finding{Code: Restricted, Severity: Fault, Branch: b.ID, Confidence: p,
					Message:  "resistance well above design: a fouled coil or strainer, or a partly closed isolating valve",
					Evidence: fmt.Sprintf("fitted resistance %.2f x design (95 %% interval %.2f-%.2f); P(ratio > %.2g) = %.3f", b.Ratio, b.Ratio*math.Exp(-1.96*b.LogSD), b.Ratio*math.Exp(1.96*b.LogSD), t.Restricted, p),
					Action:   "check strainers, isolating valves and the terminal for fouling before setting the valve"})
			}
			if p := normalCDF((-lnThr - x) / b.LogSD); p >= t.Confidence || down >= t.Confidence {
				// The evidence says which test raised the flag: the
				// fitted ratio's chance of lying under 1/Restricted, or
				// (below that confidence) the readings alone placing the
				// branch's part under its scatter and ExtraDrop, whose
				// chance is of that other event.
				lo, hi := b.Ratio*math.Exp(-1.96*b.LogSD), b.Ratio*math.Exp(1.96*b.LogSD)
				evidence := func(valve string) string {
					if p >= t.Confidence {
						return fmt.Sprintf("fitted resistance %.2f x design (95 %% interval %.2f-%.2f)%s; P(ratio < %.2g) = %.3f", b.Ratio, lo, hi, valve, 1/t.Restricted, p)
					}
					return fmt.Sprintf("about %.1f kPa less than designed at design flow (resistance %.2f x design, 95 %% interval %.2f-%.2f)%s; the readings alone put it below %.2f x design with probability %.3f", -extra/1000, b.Ratio, lo, hi, valve, math.Exp(-partLow(b, t)), down)
				}
				const atRecorded = " with the valve taken at its recorded setting"
				conf := max(p, down)
				if b.HasValve && (b.Valve == nil || b.Valve.Hypothesis == "follows its table") {
					// Where the readings cannot tell the valve from the
					// rest of the branch, a branch passing far more than
					// designed most often has its valve more open than its
					// handwheel says: a plug loose from its spindle sits in
					// the upper part of its travel, a handwheel slips off
					// its mark (common practice, no source).
					f := Finding{Code: ValveMisSet, Severity: Warning, Branch: b.ID, Confidence: conf,
						Message:  "passes water as if its balancing valve were more open than recorded: a plug loose from its spindle or a handwheel off its mark, or else an open bypass",
						Evidence: evidence(atRecorded),
						Action:   "move the handwheel a turn and read the flow again: it must change; then check for an open bypass"}
					if b.TestPoints && !b.HasFlow {
						// Its flow is known only through its own valve's
						// test points, which read high (a tapping error, a
						// meter off its calibration) exactly as a valve
						// more open than recorded does.
						f.Message = "passes water as if its balancing valve were more open than recorded: a plug loose from its spindle or a handwheel off its mark, an open bypass, or else its own valve's test points reading high, which alone read its flow"
						f.Action = "read its flow with a clamp-on meter first: if that agrees with the test points, move the handwheel a turn and read the flow again (it must change), then check for an open bypass"
					}
					out = append(out, f)
				} else {
					out = append(out, Finding{Code: Free, Severity: Warning, Branch: b.ID, Confidence: conf,
						Message:  "resistance well below design: an open bypass, a missing component, or a wrong design entry",
						Evidence: evidence(""),
						Action:   "check for an open bypass or a terminal that differs from the schedule"})
				}
			}
		}
		if v := b.Valve; v != nil {
			conf := chi2Confidence(v.DeltaChi2)
			switch v.Hypothesis {
			case "holds one Kv":
				out = append(out, Finding{Code: ValveStuck, Severity: Fault, Branch: b.ID, Confidence: conf,
					Message:  "the valve did not change its Kv when its setting was changed: seized, or its handwheel slips",
					Evidence: fmt.Sprintf("one fixed Kv explains the readings better than the valve's table (chi-square lower by %.1f)", v.DeltaChi2),
					Action:   "free or replace the valve before balancing; re-read after moving it"})
			case "set elsewhere":
				if v.Assumed {
					// Its readings say the same either way; the
					// explanations are weighed by what is common, so no
					// confidence is quoted.
					ev := fmt.Sprintf("read at its own valve's test points alone: with the valve at its recorded setting the branch would be %.2g x design, freer than any fault makes a branch; taken as set elsewhere", v.TableRatio)
					if !math.IsNaN(v.Implied) {
						ev += fmt.Sprintf(" (recorded at %g %s, about %.1f %s), its branch near design", v.Recorded, v.Unit, v.Implied, v.Unit)
					}
					out = append(out, Finding{Code: ValveMisSet, Severity: Warning, Branch: b.ID, Confidence: math.NaN(),
						Message:  "passes water as if its balancing valve were more open than recorded: a plug loose from its spindle or a handwheel off its mark, an open bypass, or else its own valve's test points reading high, which alone read its flow",
						Evidence: ev,
						Action:   "read its flow with a clamp-on meter first: if that agrees with the test points, move the handwheel a turn and read the flow again; if it does not change, the plug is loose (repair it before balancing); then check for an open bypass"})
					break
				}
				ev := fmt.Sprintf("the readings fit the valve's table at a different opening (chi-square lower by %.1f)", v.DeltaChi2)
				if !math.IsNaN(v.Implied) {
					ev = fmt.Sprintf("recorded at %g %s, the readings imply about %.1f %s (chi-square lower by %.1f)", v.Recorded, v.Unit, v.Implied, v.Unit, v.DeltaChi2)
				}
				out = append(out, Finding{Code: ValveMisSet, Severity: Warning, Branch: b.ID, Confidence: conf,
					Message:  "the valve passes water as if at another setting than recorded: its handwheel or indicator off its mark, a plug loose from its spindle, or a different valve model fitted",
					Evidence: ev,
					Action:   "move the handwheel a turn and read the flow again: if it does not change, the plug is loose (repair it before balancing); else check the handwheel's memory stop and the valve model on site"})
			}
		}
		if !math.IsNaN(b.OpenFlow) && b.Target > 0 && b.OpenFlow < (1-t.ShortFraction)*b.Target {
			out = append(out, Finding{Code: CannotReachDesign, Severity: Fault, Branch: b.ID, Confidence: math.NaN(),
				Message:  "cannot reach its target flow even with its valve fully open at the present pump",
				Evidence: fmt.Sprintf("open-valve flow %.0f %% of target", 100*b.OpenFlow/b.Target),
				Action:   "clean the branch if it is restricted, or raise the pump head (see the plan)"})
		}
	}
	for _, r := range readings {
		if r.Outlier || math.Abs(r.Normalised) > t.SuspectZ {
			msg := "reading far from what the rest of the survey implies: misread, wrong unit, wrong test points or wrong valve setting noted"
			ev := fmt.Sprintf("normalised residual %.1f", r.Normalised)
			if r.Outlier {
				ev += "; left out of the fit by the outlier test"
			}
			if r.Why != "" {
				ev += "; " + r.Why
			}
			out = append(out, Finding{Code: SuspectReading, Severity: Warning, Branch: branchOf(r), Reading: r.Label,
				Confidence: 2*normalCDF(math.Abs(r.Normalised)) - 1, Message: msg, Evidence: ev,
				Action: fmt.Sprintf("re-take the %s reading at %s", r.What, r.Where)})
		}
	}
	order := map[string]int{}
	for i, b := range branches {
		order[b.ID] = i
	}
	sort.SliceStable(out, func(i, j int) bool {
		if out[i].Severity != out[j].Severity {
			return out[i].Severity > out[j].Severity
		}
		return order[out[i].Branch] < order[out[j].Branch]
	})
	return out
}

// OffFlow is how far a pressure-independent valve's fitted flow scale must
// lie from 1 to be flagged: 5 %, about what such valves are sold to hold
// (common practice, no source).
const OffFlow = 0.05

// held returns the findings about branch b's pressure-independent valve:
// starved below its hold differential, and a setting that does not give its
// table's flow.
func held(b Branch, t Thresholds) []Finding {
	h := b.Held
	if h == nil {
		return nil
	}
	var out []Finding
	if len(h.Starved) > 0 {
		unit, per := h.Unit, h.PerSI
		if unit == "" || !(per > 0) {
			unit, per = "l/s", 1000
		}
		ev := ""
		for k, st := range h.Starved {
			if k > 0 {
				ev += "; "
			}
			ev += fmt.Sprintf("%s: %.1f kPa across the valve, which holds its flow from %.1f kPa; flow %.3g %s against %.3g %s set",
				st.State, st.ValveDiff/1e3, st.HoldDiff/1e3, st.Flow*per, unit, st.SetFlow*per, unit)
		}
		out = append(out, Finding{Code: ValveStarved, Severity: Fault, Branch: b.ID, Confidence: math.NaN(),
			Message:  "pressure-independent valve starved: it sees less than the differential at which it holds its flow, so the branch gets less than its setting gives",
			Evidence: ev,
			Action:   "clean the branch if it is restricted, or raise the pump to give this valve its hold differential (see the plan)"})
	}
	if h.Fitted && h.Determined && h.Scale > 0 && h.Lo > 0 && h.Hi > h.Lo {
		sd := math.Log(h.Hi/h.Lo) / (2 * 1.96)
		x := math.Log(h.Scale)
		p := max(normalCDF((math.Log(1-OffFlow)-x)/sd), normalCDF((x-math.Log(1+OffFlow))/sd))
		if p >= t.Confidence {
			out = append(out, Finding{Code: ValveOffFlow, Severity: Warning, Branch: b.ID, Confidence: p,
				Message:  "the pressure-independent valve's setting does not give its table's flow: its limiter off its mark or fouled, or another model fitted",
				Evidence: fmt.Sprintf("it passes %.2f of its table's flow while regulating (95 %% interval %.2f-%.2f)", h.Scale, h.Lo, h.Hi),
				Action:   "check the valve model and its dial; set it by the measured flow (the plan's setting allows for the fitted ratio)"})
		}
	}
	return out
}

// byPart returns the probabilities, from the readings alone, that branch b's
// resistance lies above (below) both ScatterRatio times design and the ratio
// that adds (removes) ExtraDrop at design flow; 0 where there is no such
// evidence.
func byPart(b Branch, t Thresholds) (up, down float64) {
	if !(b.DataSD > 0) || math.IsNaN(b.DataLn) || !(b.DesignDrop > 0) {
		return 0, 0
	}
	hi := max(math.Log(t.ScatterRatio), math.Log1p(t.ExtraDrop/b.DesignDrop))
	up = normalCDF((b.DataLn - hi) / b.DataSD)
	if t.ExtraDrop < b.DesignDrop {
		down = normalCDF((-partLow(b, t) - b.DataLn) / b.DataSD)
	}
	return up, down
}

// partLow is how far below design, in ln of the ratio, byPart's readings
// must place a branch: past a clean branch's scatter and past the ratio that
// removes ExtraDrop at design flow (+Inf where the design drop is no more).
func partLow(b Branch, t Thresholds) float64 {
	if !(t.ExtraDrop < b.DesignDrop) {
		return math.Inf(1)
	}
	return max(math.Log(t.ScatterRatio), -math.Log1p(-t.ExtraDrop/b.DesignDrop))
}

func branchOf(r Reading) string {
	if r.Where == "pump" || r.Where == "header" {
		return ""
	}
	return r.Where
}

func suggestReading(b Branch) string {
	switch {
	case !b.HasFlow && b.HasValve:
		return "read the flow at the balancing valve's test points, or better with a clamp-on meter, and the differential across the whole branch"
	case !b.HasFlow:
		return "take a clamp-on flow reading on the branch"
	default:
		return "read the differential across the whole branch, or take a second state with the valve moved"
	}
}

func list(s []string) string {
	if len(s) == 0 {
		return "nothing"
	}
	out := s[0]
	for _, x := range s[1:] {
		out += ", " + x
	}
	return out
}

// normalCDF is the standard normal distribution function.
func normalCDF(z float64) float64 { return 0.5 * math.Erfc(-z/math.Sqrt2) }

// chi2Confidence turns a chi-square improvement of one extra parameter into
// the probability that the simpler hypothesis is wrong (likelihood-ratio
// test, Wilks 1938: the improvement is chi-square with one degree of freedom
// under the simpler hypothesis).
func chi2Confidence(d float64) float64 {
	if !(d > 0) {
		return 0
	}
	return 2*normalCDF(math.Sqrt(d)) - 1
}
