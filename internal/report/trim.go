package report

import (
	"fmt"
	"math"
	"sort"

	"github.com/go-echarts/go-echarts/v2/charts"
	"github.com/go-echarts/go-echarts/v2/opts"
)

// Trim is the round after setting: what the readings taken once the valves
// were set prove, the small corrections to make and the pump's, and each
// branch as found, as the plan predicted it and as left. An Input with a
// Trim is drawn as the round's report: its first pages are the round's
// instead of the visit's, and its appendix holds the model fitted to every
// survey state (branch curves, resistances, findings, readings).
type Trim struct {
	// State is the label of the survey state read after setting.
	State string
	// Summary is the round's outcome, one line each, in plain words.
	Summary []string
	// Pump is the pump correction (From and To equal, or To "leave it as
	// it is", when none is worth making).
	Pump PumpStep
	// Trims lists the branches to act on (a trim, or a reading to take
	// first), in adjustment order, with write-in columns for paper.
	Trims Table
	// Branches are every branch in walk order.
	Branches []TrimBranch
	// File names the file beside the report holding the round's whole
	// table (e.g. "trim.csv").
	File string
}

// TrimBranch is one branch of the round. Flows are in percent of the
// branch's target; NaN where not available.
type TrimBranch struct {
	ID string
	// Found is the flow as found (fitted to the first survey), Predicted
	// what the plan the valves were set to predicted, Left the flow as
	// left (the model fitted to every state, the readings after setting
	// included) with its 95 % band, After the model's flow once the trims
	// are made.
	Found, Predicted, Left, LeftLow, LeftHigh, After float64
	// Read reports that the branch was read after setting; otherwise its
	// flow as left is the refit's prediction alone.
	Read bool
	// Verdict is what the readings say of it as left, in words ("proven in
	// tolerance", "proven out of tolerance", "cannot tell").
	Verdict string
	// Proven reports that the verdict is proven in tolerance.
	Proven bool
	// Trim is the setting to trim it to, as text ("" when untouched).
	Trim string
	// Note says why a branch outside the band is not trimmed, or what to
	// read ("" when nothing).
	Note string
}

// trimTable is the round's branch-by-branch table.
func trimTable(t *Trim) Table {
	out := Table{Title: "Branch by branch", File: t.File,
		Columns: []string{"Branch", "As found (%)", "Plan said (%)", "As left (%)", "95 % band (%)", "Verdict as left", "Trim to", "After trims (%)"}}
	for _, b := range t.Branches {
		left := pct1(b.Left) + ", model"
		if b.Read {
			left = pct1(b.Left) + ", read"
		}
		band := "—"
		if finite(b.LeftLow, b.LeftHigh) {
			band = pct1(b.LeftLow) + "–" + pct1(b.LeftHigh)
		}
		trim := dash(b.Trim)
		if b.Note != "" {
			if b.Trim == "" {
				trim = b.Note
			} else {
				trim += "; " + b.Note
			}
		}
		out.Rows = append(out.Rows, []string{b.ID, pct1(b.Found), pct1(b.Predicted), left, band, b.Verdict, trim, pct1(b.After)})
	}
	out.Notes = []string{"Percentages are of each branch’s target flow. “As left” is the model fitted to every survey state, the readings taken after setting included: “read” marks a branch read after setting, whose value follows its reading; “model” one not read, whose value is a prediction and whose band says how far it may be wrong. A branch is proven in tolerance only when its whole band lies inside the tolerance."}
	return out
}

// pct1 formats a percentage with one decimal; NaN is a dash.
func pct1(v float64) string {
	if !finite(v) {
		return "—"
	}
	return fmt.Sprintf("%.1f", v)
}

// pickTrim returns the indices, in walk order, of the branches the round's
// chart shows: all of them up to maxWindow, otherwise those trimmed or
// proven out first, then those read after setting, then the furthest from
// target as left.
func pickTrim(bs []TrimBranch) []int {
	idx := make([]int, len(bs))
	for i := range idx {
		idx[i] = i
	}
	if len(bs) <= maxWindow {
		return idx
	}
	score := func(i int) float64 {
		b := &bs[i]
		s := 0.0
		if b.Trim != "" || b.Note != "" {
			s += 1e9
		}
		if b.Read {
			s += 1e6
		}
		if finite(b.Left) {
			s += math.Abs(b.Left - 100)
		}
		return s
	}
	sort.SliceStable(idx, func(a, b int) bool { return score(idx[a]) > score(idx[b]) })
	idx = idx[:maxWindow]
	sort.Ints(idx)
	return idx
}

// trimChart draws, per branch, the flow as found, as the plan predicted it
// and as left (read after setting: filled square; the model only: hollow
// square), with the 95 % interval of as left and the tolerance shaded.
func trimChart(id string, in *Input, pick []int) chart {
	bs := in.Trim.Branches
	n := len(pick)
	labels := make([]string, n)
	found := make([]opts.ScatterData, n)
	pred := make([]opts.ScatterData, n)
	read := make([]opts.ScatterData, n)
	model := make([]opts.ScatterData, n)
	var bars []opts.CustomData
	for k, i := range pick {
		b := &bs[i]
		labels[k] = Clean(b.ID)
		found[k] = opts.ScatterData{Name: labels[k], Value: yValue(b.Found)}
		pred[k] = opts.ScatterData{Name: labels[k], Value: yValue(b.Predicted)}
		read[k] = opts.ScatterData{Name: labels[k], Value: missing}
		model[k] = opts.ScatterData{Name: labels[k], Value: missing}
		if b.Read {
			read[k].Value = yValue(b.Left)
		} else {
			model[k].Value = yValue(b.Left)
		}
		if finite(b.Left, b.LeftLow, b.LeftHigh) {
			x := float64(k)
			bars = append(bars, errBar(labels[k], x, b.Left, x, x, b.LeftLow, b.LeftHigh))
		}
	}
	lo, hi := 100+in.ToleranceLow, 100+in.ToleranceHigh
	l := base(id, wideW, wideH,
		legend(entry{name: "as found"}, entry{name: "predicted by the plan"}, entry{name: "as left, read"},
			entry{name: "as left, model only"}, entry{name: "as left, 95 % interval", icon: iconErrBar}),
		categoryGrid(n),
		charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: "flow, % of target", NameLocation: "middle", NameGap: 44, Scale: opts.Bool(true)}),
	)
	categoryAxis(l, labels)
	sc := charts.NewScatter()
	sc.AddSeries("as found", found,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "emptyCircle", SymbolSize: 10}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colAsFound, BorderColor: colAsFound, BorderWidth: 2}),
		toleranceBand(lo, hi, "target"))
	sp := charts.NewScatter()
	sp.AddSeries("predicted by the plan", pred,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "diamond", SymbolSize: 11}),
		seriesColor(colGreen))
	cu := charts.NewCustom()
	cu.AddSeries("as left, 95 % interval", bars,
		append(custom(renderErrBar, opts.Encode{X: 0, Y: []int{1, 4, 5}}), seriesColor(colBlue))...)
	sl := charts.NewScatter()
	sl.AddSeries("as left, read", read,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "rect", SymbolSize: 10}),
		seriesColor(colBlue))
	sl.AddSeries("as left, model only", model,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "emptyRect", SymbolSize: 10}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colBlue, BorderColor: colBlue, BorderWidth: 2}))
	l.Overlap(sc, sp, cu, sl)
	return finish(l, id, "", wideW, wideH)
}

// validate returns the round's problems; num reports an infinite number.
func (t *Trim) validate(num func(string, float64)) []error {
	var errs []error
	for i := range t.Branches {
		b := &t.Branches[i]
		w := fmt.Sprintf("trim branch %d", i)
		for _, f := range []struct {
			n string
			v float64
		}{{"Found", b.Found}, {"Predicted", b.Predicted}, {"Left", b.Left}, {"LeftLow", b.LeftLow}, {"LeftHigh", b.LeftHigh}, {"After", b.After}} {
			num(w+" "+f.n, f.v)
		}
	}
	for i, r := range t.Trims.Rows {
		if len(t.Trims.Columns) > 0 && len(r) != len(t.Trims.Columns) {
			errs = append(errs, fmt.Errorf("trims table row %d has %d cells, want %d: %w", i, len(r), len(t.Trims.Columns), ErrInvalid))
		}
	}
	return errs
}
