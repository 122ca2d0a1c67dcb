package balance

import (
	"fmt"
	"math"
	"strconv"
	"strings"
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
	}
	return header, rows
}

// Summary returns the plan's headline lines for the top of a field sheet.
func (p *Plan) Summary() []string {
	var out []string
	if p.DesignOnly {
		out = append(out, "Plan from design data only: no survey calibrated this model; expect to fine-tune on site.")
	}
	out = append(out, fmt.Sprintf("Index circuit: %s (path %s); valve fully open.", p.Index, strings.Join(p.IndexPath, " > ")))
	out = append(out, fmt.Sprintf("Source differential needed: %.1f kPa (least with exact settings %.1f kPa) at %.3f l/s.", p.Required/1e3, p.Least/1e3, p.TotalFlow*1e3))
	pp := p.Pump
	if finite(pp.SpeedRatio) {
		out = append(out, fmt.Sprintf("Pump speed: %.1f %% of nominal.", 100*pp.SpeedRatio))
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
		out = append(out, fmt.Sprintf("Not met: %s at %.0f %% of target (%s).", s.ID, s.Percent, s.Reason))
	}
	out = append(out, p.Warnings...)
	out = append(out, pp.Assumptions...)
	out = append(out, "Check readings hold once every valve is set and the pump runs as planned.")
	return out
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
