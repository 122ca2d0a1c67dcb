package cli

import (
	"fmt"
	"strconv"
	"strings"

	"flowset/internal/balance"
)

// fieldSheetWriteIn are the blank columns of the field sheet for writing in
// on site.
var fieldSheetWriteIn = []string{"Set (tick)", "Read after", "Initials"}

// fieldSheet is the plan's field sheet (balance.Plan.Rows) in the display
// units, with the write-in columns at the end. The plan's rows are in l/s
// and kPa; each such column is converted and renamed here, so the sheet
// and the report quote the same figures.
func (j *job) fieldSheet(u display) ([]string, [][]string) {
	h, rows := j.Plan.Rows()
	conv := make([]func(float64) float64, len(h))
	head := make([]string, len(h))
	for k, c := range h {
		head[k] = c
		switch {
		case strings.Contains(c, "(l/s)"):
			head[k] = strings.Replace(c, "(l/s)", "("+u.FlowUnit+")", 1)
			conv[k] = func(v float64) float64 { return u.toFlow(v * 1e-3) }
		case strings.HasPrefix(c, "Kv required") && u.Name == "us":
			head[k] = "Cv required (US gpm at 1 psi)"
			f := u.cvPerKv()
			conv[k] = func(v float64) float64 { return v * f }
		case strings.Contains(c, "(kPa)"):
			head[k] = strings.Replace(c, "(kPa)", "("+u.DiffUnit+")", 1)
			conv[k] = func(v float64) float64 { return u.toDiff(v * 1e3) }
		}
	}
	// Which branches to read after setting, and why: the prove-it list's.
	prove := map[string]string{}
	for _, r := range j.proveTable(u).Rows {
		prove[r[0]] = r[1]
	}
	out := make([][]string, len(rows))
	for r, row := range rows {
		nr := make([]string, 0, len(row)+1+len(fieldSheetWriteIn))
		for k, cell := range row {
			if conv[k] != nil && u.Name != "si" && cell != "" {
				if v, err := strconv.ParseFloat(cell, 64); err == nil {
					cell = strconv.FormatFloat(conv[k](v), 'f', 2, 64)
					if strings.HasPrefix(head[k], "Cv") {
						cell = strconv.FormatFloat(conv[k](v), 'g', 3, 64)
					}
				}
			}
			nr = append(nr, cell)
		}
		if row[4] == balance.ControllerValve {
			nr = append(nr, "read across the span: it must read the new set point")
		} else {
			nr = append(nr, prove[row[1]])
		}
		if row[4] == balance.ControllerValve && u.Name != "si" {
			// A controller's settings are set points, in kPa in the plan's
			// rows: shown in the display's pressure unit like the check.
			for _, k := range []int{6, 7} {
				if v, err := strconv.ParseFloat(row[k], 64); err == nil {
					nr[k] = strconv.FormatFloat(u.toDiff(v*1e3), 'f', 2, 64)
				}
			}
			nr[5] = u.DiffUnit
		}
		for range fieldSheetWriteIn {
			nr = append(nr, "")
		}
		out[r] = nr
	}
	return append(append(head, "Read after setting: why"), fieldSheetWriteIn...), out
}

// fieldSheetAbout is the workbook's "about" sheet: site, date, the visit's
// pump step and order of work in the display units, and the cautions.
func (j *job) fieldSheetAbout(u display, generated string) []string {
	v := j.visit(u)
	about := []string{j.L.Site.Name, "generated " + generated}
	about = append(about, v.Short...)
	in0, n, in1 := j.toleranceCounts()
	about = append(about, fmt.Sprintf("Branches in tolerance: %d of %d as found, %d of %d after the plan.", in0, n, in1, n))
	about = append(about, "Pump: "+v.Pump.From+" → "+v.Pump.To+"; set at "+v.Pump.Where+".")
	about = append(about, v.Pump.Pumps...)
	about = append(about, v.Pump.Warnings...)
	about = append(about, v.OrderReason)
	return append(about, cautions(j.L.Site)...)
}
