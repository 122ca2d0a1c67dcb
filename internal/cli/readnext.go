package cli

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"flowset/internal/balance"
	"flowset/internal/site"
)

// rankOf returns, by branch ID (or "pump"), its place (from 1) among the
// places to read in the ranking's order, and its first reading; nil
// without a ranking.
func (j *job) rankOf() map[string]rankedRead {
	if j.Reads == nil || j.surveyPlan {
		return nil
	}
	out := map[string]rankedRead{}
	for _, c := range j.Reads.Readings {
		if c.Gain < minGain {
			// Listed in read-next.csv, but not worth a place of its own
			// in the prove-it list.
			break
		}
		if _, ok := out[c.Where]; !ok {
			out[c.Where] = rankedRead{len(out) + 1, c}
		}
	}
	return out
}

// minGain is the least risk a reading must remove (a hundredth of a branch
// expected outside the tolerance) to be ordered in the prove-it list.
const minGain = 0.01

type rankedRead struct {
	Rank int
	balance.Candidate
}

// readNextRows is read-next.csv: the readings to take after setting, in
// order, with what each should give and what it settles.
func (j *job) readNextRows(u display) ([]string, [][]string) {
	h := []string{"Order", "Where", "Read by", "Expect", "95 % band", "Unit", "Minutes", "Risk removed (branches)", "What it settles"}
	var rows [][]string
	if j.Reads == nil {
		return h, rows
	}
	for k, c := range j.Reads.Readings {
		exp, lo, hi, unit := readValues(c, u)
		rows = append(rows, []string{fmt.Sprint(k + 1), c.Where, readBy(c.How), exp, lo + " to " + hi, unit, fmt.Sprintf("%.0f", c.Minutes), fmt.Sprintf("%.3f", c.Gain), c.Settles})
	}
	return h, rows
}

// readValues is what a ranked reading should give, its band and their unit,
// in the display's units: the pump's differential where it runs on its
// curve, a flow elsewhere (at a pump holding a differential, the total
// flow).
func readValues(c balance.Candidate, u display) (exp, lo, hi, unit string) {
	if c.Quantity == site.PumpDiff {
		return u.diffNum(c.Expect), u.diffNum(c.Low), u.diffNum(c.High), u.DiffUnit
	}
	return u.flowNum(c.Expect), u.flowNum(c.Low), u.flowNum(c.High), u.FlowUnit
}

// readBy says how a reading is taken, in a technician's words.
func readBy(k balance.ReadKind) string {
	switch k {
	case balance.ByValveMeter:
		return "valve meter at the test points (flow and valve differential)"
	case balance.ByClampOn:
		return "clamp-on flow meter"
	case balance.AtPump:
		return "pump differential and total flow"
	}
	return k.String()
}

// surveyNote says, for a plan from design, where to read first: the top of
// the ranking taken as found ("" otherwise).
func (j *job) surveyNote() string {
	if !j.surveyPlan || j.Reads == nil || len(j.Reads.Readings) == 0 {
		return ""
	}
	var first []string
	seen := map[string]bool{}
	for _, c := range j.Reads.Readings {
		if len(first) == 5 {
			break
		}
		if !seen[c.Where] {
			seen[c.Where] = true
			first = append(first, c.Where+" ("+strings.ReplaceAll(c.How.String(), "-", " ")+")")
		}
	}
	return "Before setting anything from design data, survey the plant as found: read-next.csv lists where to read, in order of how much each reading lowers the plan's risk (first " + strings.Join(first, ", ") + "), and survey-route.csv walks them in the order of the plant (--survey-minutes or --survey-readings bounds the round)."
}

type readNextJSON struct {
	Risk       num              `json:"risk_branches_out"`
	RiskAfter  num              `json:"risk_after_listed"`
	NeedSD     num              `json:"need_ln_sd"`
	Contenders []string         `json:"index_contenders"`
	Note       string           `json:"note,omitempty"`
	Survey     bool             `json:"survey_before_setting"`
	Readings   []readingOutJSON `json:"readings"`
}

type readingOutJSON struct {
	Where   string `json:"where"`
	How     string `json:"how"`
	Expect  num    `json:"expect"`
	Low     num    `json:"band_low"`
	High    num    `json:"band_high"`
	Unit    string `json:"unit"`
	Minutes num    `json:"minutes"`
	Gain    num    `json:"risk_removed"`
	Settles string `json:"settles"`
	// At is the setting a check is read at (its valve moved for it and
	// put back), null for a reading at the plan's setting.
	At num `json:"at_setting"`
}

func (j *job) readNextOut() readNextJSON {
	out := readNextJSON{Risk: num(math.NaN()), RiskAfter: num(math.NaN()), NeedSD: num(math.NaN()), Readings: []readingOutJSON{}}
	if j.Reads == nil {
		out.Note = "not ranked: no fit (the plan is from design) or a site above the ranking's size"
		return out
	}
	r := j.Reads
	out.Risk, out.RiskAfter, out.NeedSD, out.Contenders, out.Note = num(r.Risk), num(r.RiskAfter), num(r.NeedSD), r.Contenders, r.Note
	out.Survey = j.surveyPlan
	for _, c := range r.Readings {
		unit := "m3/s"
		if c.Quantity == site.PumpDiff {
			unit = "Pa"
		}
		at := math.NaN()
		if c.Check {
			at = c.At
		}
		out.Readings = append(out.Readings, readingOutJSON{Where: c.Where, How: c.How.String(), Expect: num(c.Expect), Low: num(c.Low), High: num(c.High), Unit: unit, Minutes: num(c.Minutes), Gain: num(c.Gain), Settles: c.Settles, At: num(at)})
	}
	return out
}

// surveyRoute is the survey before the visit as a walk: the ranked readings
// taken in the ranking's order while they fit in the time allowed
// (jobOptions.SurveyMinutes, all of them for 0) and number allowed
// (jobOptions.SurveyReadings), then put in the order of
// the plant (the pump first, in the plant room, then the branches in the
// plan's walk: along the main headers from the pump outwards, a riser's
// branches before the riser), so the technician reads them in one round.
// It returns the readings in route order with each one's rank.
func (j *job) surveyRoute() []rankedRead {
	if !j.surveyPlan || j.Reads == nil || j.Plan == nil {
		return nil
	}
	budget, most := j.opts.SurveyMinutes, j.opts.SurveyReadings
	var chosen []rankedRead
	var used float64
	for k, c := range j.Reads.Readings {
		if most > 0 && len(chosen) == most {
			break
		}
		if budget > 0 && used+c.Minutes > budget {
			continue
		}
		used += c.Minutes
		chosen = append(chosen, rankedRead{k + 1, c})
	}
	stop := map[string]int{"pump": 0}
	for k, b := range j.Plan.Branches {
		stop[b.ID] = k + 1
	}
	slices.SortStableFunc(chosen, func(a, b rankedRead) int { return stop[a.Where] - stop[b.Where] })
	return chosen
}

// surveyRouteRows is survey-route.csv.
func (j *job) surveyRouteRows(u display) ([]string, [][]string) {
	h := []string{"Stop", "Where", "Read by", "Design expects", "95 % band", "Unit", "Minutes", "Minutes so far", "Rank by value", "What it settles"}
	var rows [][]string
	var total float64
	for k, r := range j.surveyRoute() {
		c := r.Candidate
		exp, lo, hi, unit := readValues(c, u)
		total += c.Minutes
		rows = append(rows, []string{fmt.Sprint(k + 1), c.Where, readBy(c.How), exp, lo + " to " + hi, unit, fmt.Sprintf("%.0f", c.Minutes), fmt.Sprintf("%.0f", total), fmt.Sprint(r.Rank), c.Settles})
	}
	return h, rows
}
