package balance

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"flowset/internal/site"
)

// Rows returns the field sheet: a header naming each column with its unit,
// and one row per branch in walk order. Flows are in l/s and differentials in
// kPa, the site sheets' default units; settings in each valve's own unit.
// Empty cells mean not applicable. The CLI writes CSV, workbook or table
// from these.
func (p *Plan) Rows() (header []string, rows [][]string) {
	header = []string{
		"Order", "Branch", "Hangs from", "Basis", "Valve", "Setting unit", "As-found setting", "New setting",
		"Kv required (m3/h at 1 bar)", "Target (l/s)", "Predicted (l/s)", "Predicted (% of target)",
		"Band low (% of target)", "Band high (% of target)", "In tolerance",
		"Check: valve differential (kPa)", "Branch differential (kPa)", "Authority", "Notes",
	}
	basis := "calibrated model"
	if p.DesignOnly {
		basis = "design data only"
	}
	for k, b := range p.Branches {
		tol := "yes"
		if !b.InTolerance {
			tol = "no"
		} else if p.Banded && !b.BandInTolerance {
			tol = "yes (band leaves it)"
		}
		row := []string{
			strconv.Itoa(k + 1), b.ID, b.Parent, basis, b.Valve, b.Unit,
			setting(b.Current, b.Unit), setting(b.New, b.Unit), num(b.KvRequired, "%.3g"),
			num(b.Target*1e3, "%.3f"), num(b.Predicted*1e3, "%.3f"), num(b.Percent, "%.1f"),
			num(b.BandLow, "%.1f"), num(b.BandHigh, "%.1f"), tol,
			"", num(b.BranchDiff/1e3, "%.2f"), num(b.Authority, "%.2f"), strings.Join(b.Notes, "; "),
		}
		if b.Valve != "" || finite(b.New) {
			row[15] = num(b.ValveDiff/1e3, "%.2f")
		}
		rows = append(rows, row)
		if b.Bypass != "" {
			// A three-port terminal's bypass valve, set with the
			// three-port valve to full bypass; its check reading is its
			// drop at the target flow.
			note := "set with the three-port valve to full bypass: full bypass passes full coil flow"
			if b.BypassShort {
				note = "fully open, and still the bypass passes less than the coil"
			}
			rows = append(rows, []string{
				"", b.ID + " bypass", b.Parent, basis, b.Bypass, b.BypassUnit, setting(b.BypassNow, b.BypassUnit), setting(b.BypassNew, b.BypassUnit),
				num(b.BypassKv, "%.3g"), num(b.Target*1e3, "%.3f"), "", "", "", "", "",
				num(b.BypassDiff/1e3, "%.2f"), "", "", note,
			})
		}
		if c := p.Controller(b.ID); c != nil {
			// The riser's differential controller: its set point is the
			// setting, the span's differential the check reading.
			rows = append(rows, []string{
				"", b.ID, b.Parent, basis, ControllerValve, "kPa", num(c.Current/1e3, "%.2f"), num(c.SetPoint/1e3, "%.2f"), "",
				num(b.Target*1e3, "%.3f"), "", "", "", "", "",
				num(c.Span/1e3, "%.2f"), "", "", strings.Join(c.Notes, "; "),
			})
		}
	}
	for k := range rows {
		rows[k][0] = strconv.Itoa(k + 1)
	}
	return header, rows
}

// ControllerValve names a differential controller in the field sheet's
// valve column.
const ControllerValve = "differential controller"

// Controller returns the plan of riser id's differential controller, or nil.
func (p *Plan) Controller(id string) *ControllerPlan {
	for k := range p.Controllers {
		if p.Controllers[k].ID == id {
			return &p.Controllers[k]
		}
	}
	return nil
}

// Summary returns the plan's headline lines for the top of a field sheet.
func (p *Plan) Summary() []string {
	var out []string
	if p.DesignOnly {
		out = append(out, "Plan from design data only: no survey calibrated this model; expect to fine-tune on site.")
	}
	out = append(out, p.RemedyLines()...)
	out = append(out, fmt.Sprintf("Index circuit: %s (path %s); valve fully open.", p.Index, strings.Join(p.IndexPath, " > ")))
	if p.Pump.Short {
		out = append(out, fmt.Sprintf("Source differential of the plan: %.1f kPa at %.3f l/s, all the pump gives (every target would need %.1f kPa).", p.Required/1e3, p.TotalFlow*1e3, p.Least/1e3))
	} else {
		out = append(out, fmt.Sprintf("Source differential needed: %.1f kPa (least with exact settings %.1f kPa) at %.3f l/s.", p.Required/1e3, p.Least/1e3, p.TotalFlow*1e3))
	}
	pp := p.Pump
	if pp.Short {
		out = append(out, fmt.Sprintf("Pump short of head: every target needs %.1f kPa at %.3f l/s, the pump gives %.1f kPa there at its maximum speed (%.1f kPa short; speed ratio %.3f would be needed, %.3f is allowed); it runs flat out and the plan shares the shortfall out %s.",
			pp.Needed/1e3, p.TotalTarget()*1e3, pp.Available/1e3, (pp.Needed-pp.Available)/1e3, pp.NeededSpeed, pp.MaxSpeed, shareWords[p.Share]))
	}
	if finite(pp.SpeedRatio) {
		line := fmt.Sprintf("Pump speed: %.1f %% of nominal.", 100*pp.SpeedRatio)
		if pp.Boundary == site.ConstantDiff {
			line = fmt.Sprintf("The drive will run at %.1f %% of nominal speed to hold the set point.", 100*pp.SpeedRatio)
		}
		out = append(out, line)
	}
	if finite(pp.TrimRatio) {
		out = append(out, fmt.Sprintf("Fixed-speed alternative: impeller trimmed to %.1f %% of its diameter (diameter affinity laws, approximate: trim in steps and re-test).", 100*pp.TrimRatio))
	}
	out = append(out, fmt.Sprintf("Differential at the sensor (%s): %.1f kPa.", pp.Sensor, pp.SetPoint/1e3))
	out = append(out, fmt.Sprintf("Branches predicted in tolerance (%+.0f %% to %+.0f %%): %d of %d.", 100*p.ToleranceLow, 100*p.ToleranceHigh, p.InTolerance(), len(p.Branches)))
	if pp.HaveBefore {
		out = append(out, fmt.Sprintf("Pump electrical power: %.0f W before, %.0f W after.", pp.ElectricalBefore, pp.ElectricalAfter))
		if finite(pp.AnnualEnergySaving) {
			word, kwh, cost := "saving", pp.AnnualEnergySaving, pp.AnnualCostSaving
			if math.Round(kwh) < 0 {
				// The plan needs more pump power than as found (short
				// branches brought up to design): say so without a minus.
				word, kwh, cost = "increase", -kwh, -cost
			}
			line := fmt.Sprintf("Annual energy %s: %.0f kWh", word, math.Abs(math.Round(kwh)))
			if finite(cost) {
				line += fmt.Sprintf(", %.0f %s", math.Abs(math.Round(cost)), pp.Currency)
			}
			out = append(out, line+".")
		}
	}
	for _, s := range p.Unmet {
		line := fmt.Sprintf("Not met: %s at %.0f %% of target (%s)", s.ID, s.Percent, s.Reason)
		if s.Reason == StarvedReason {
			line = fmt.Sprintf("Not met: %s at %.0f %% of target (needs %.1f kPa at the pump for its target, which gives %.1f kPa flat out: valve fully open)", s.ID, s.Percent, s.Needs/1e3, p.Required/1e3)
		}
		if s.Remedy != "" {
			line += "; remedy: " + s.Remedy
		}
		out = append(out, line+".")
	}
	out = append(out, p.Warnings...)
	out = append(out, pp.Assumptions...)
	out = append(out, "Check readings hold once every valve is set and the pump runs as planned.")
	return out
}

// shareWords says how each policy shares a shortfall out.
var shareWords = map[Share]string{
	DesignFirst:  "design first (branches that can reach target get it; the rest have their valves fully open)",
	Proportional: "in proportion (every branch short by about the same fraction)",
}

// RemedyLines returns the remedies as the plan's first lines: what to put
// right, what each saves, and that the settings are for the plant as it
// stands.
func (p *Plan) RemedyLines() []string {
	if len(p.Remedies) == 0 {
		return nil
	}
	out := []string{fmt.Sprintf("Put right first (%d); the settings below are for the plant as it stands:", len(p.Remedies))}
	for k, r := range p.Remedies {
		line := fmt.Sprintf("%d. %s.", k+1, upper(r.Action))
		if r.Kind != LargerPump && r.Kind != SmallerValve && r.Kind != FitValve {
			if r.Saves > 0.005*r.Least {
				line += fmt.Sprintf(" Saves %.1f kPa of source differential (%.1f to %.1f kPa for every target)", r.Saves/1e3, r.Least/1e3, r.LeastAfter/1e3)
				if finite(r.Power) {
					line += fmt.Sprintf(", %.0f W of pump power", r.Power)
					if finite(r.AnnualEnergy) {
						line += fmt.Sprintf(", %.0f kWh a year", r.AnnualEnergy)
					}
				}
				line += "."
			}
			if r.Starved {
				line += fmt.Sprintf(" The branch needs %.1f kPa at the pump for its target, %.1f kPa after.", r.Need/1e3, r.NeedAfter/1e3)
			}
			if p.Pump.Short && r.Serves {
				line += " With it the pump serves every target."
			}
		}
		out = append(out, line)
	}
	if finite(p.LeastRemedied) {
		out = append(out, fmt.Sprintf("With every restriction above cleared, every target needs %.1f kPa (now %.1f kPa).", p.LeastRemedied/1e3, p.Least/1e3))
	}
	return out
}

// upper returns s with its first letter in upper case.
func upper(s string) string {
	if s == "" || s[0] < 'a' || s[0] > 'z' {
		return s
	}
	return string(s[0]-'a'+'A') + s[1:]
}

// TotalTarget returns the total target flow, m3/s: the sum over the
// branches on the main headers.
func (p *Plan) TotalTarget() float64 {
	var q float64
	for _, b := range p.Branches {
		if b.Depth == 0 {
			q += b.Target
		}
	}
	return q
}

func num(v float64, f string) string {
	if !finite(v) {
		return ""
	}
	return fmt.Sprintf(f, v)
}

// setting prints a setting with the decimals its unit usually needs.
func setting(v float64, unit string) string {
	if !finite(v) {
		return ""
	}
	d := 2
	if unit == "%" {
		d = 1
	}
	if unit == "steps" {
		d = 0
		if v != math.Trunc(v) {
			d = 2
		}
	}
	return strconv.FormatFloat(v, 'f', d, 64)
}
