package report

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"github.com/go-echarts/go-echarts/v2/charts"
	"github.com/go-echarts/go-echarts/v2/opts"
	"github.com/go-echarts/go-echarts/v2/types"
)

// Colours are the Okabe-Ito palette (Okabe and Ito, "Color Universal Design",
// 2008), chosen because its eight colours stay distinct under the common
// colour-vision deficiencies. Readings and flags are vermillion, so "as
// found" takes the palette's reddish purple rather than its orange, which
// sits too close to vermillion to tell apart at a glance (and under
// protanopia and deuteranopia); the pump, which never shares a chart with
// the design curve, is black. Shapes and line styles carry the same
// meaning, so nothing depends on colour alone: before is dashed / hollow
// circle, after is solid / filled diamond, a flag is a triangle.
const (
	colBlack      = "#000000" // design; pump
	colAsFound    = "#CC79A7" // before (Okabe-Ito reddish purple)
	colSky        = "#56B4E9" // uncertainty band
	colGreen      = "#009E73" // after
	colBlue       = "#0072B2" // fitted / system
	colVermillion = "#D55E00" // measured, flagged
	colPump       = colBlack  // pump curves
	colGrey       = "#777777" // connectors
)

// palette is the series colour cycle; every series sets its own colour,
// so it only matters for anything echarts adds itself.
func palette() opts.Colors {
	return opts.Colors{colBlue, colAsFound, colGreen, colVermillion, colSky, colBlack}
}

// Chart sizes in CSS pixels: 680 px is 180 mm at 96 dpi, the printable width
// of A4 with 15 mm margins, so charts print at their screen size.
const (
	wideW, wideH   = 680, 380
	smallW, smallH = 332, 250
)

// maxSmall is the most per-branch charts drawn; beyond it only the flagged
// and furthest-from-design branches are drawn.
const maxSmall = 24

// maxWindow is the most categories shown at once in a per-branch chart;
// more add a zoom slider.
const maxWindow = 40

// Custom series renderer names, resolved to constant functions by
// assets/report.js. They are never built from user text.
const (
	renderBand   = "band"
	renderErrBar = "errbar"
	renderSpan   = "span"
)

// chart is one chart of the page: the DOM id (never user text), its size
// and the echarts option built by go-echarts.
type chart struct {
	ID      string         `json:"id"`
	W       int            `json:"-"`
	H       int            `json:"-"`
	Caption string         `json:"-"`
	Option  map[string]any `json:"option"`
	// Follow, on a large site's flow ("flow") and resistance ("ratio")
	// charts, has assets/report.js redraw them for the branches on the
	// finder's page.
	Follow string `json:"follow,omitempty"`
}

// sig rounds v to 5 significant digits: enough for any chart, and it keeps
// float noise such as 0.30000000000000004 out of tooltips and the file.
func sig(v float64) float64 {
	r, err := strconv.ParseFloat(strconv.FormatFloat(v, 'g', 5, 64), 64)
	if err != nil {
		return v
	}
	return r
}

func finite(v ...float64) bool {
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// pct is a flow in percent of design, NaN where design is not positive.
func pct(v, design float64) float64 {
	if !finite(v, design) || design <= 0 {
		return math.NaN()
	}
	return 100 * v / design
}

func lineData(c []XY) []opts.LineData {
	d := make([]opts.LineData, 0, len(c))
	for _, p := range c {
		if finite(p.X, p.Y) {
			d = append(d, opts.LineData{Value: []float64{sig(p.X), sig(p.Y)}})
		}
	}
	return d
}

// bandData is the closed outline of the region between lo and hi: lo in
// order, then hi reversed. The "band" renderer fills it as one polygon,
// which avoids the stacking of area series along the wrong axis.
func bandData(lo, hi []XY) []opts.CustomData {
	var d []opts.CustomData
	for _, p := range lo {
		if finite(p.X, p.Y) {
			d = append(d, opts.CustomData{Value: []float64{sig(p.X), sig(p.Y)}})
		}
	}
	for i := len(hi) - 1; i >= 0; i-- {
		if p := hi[i]; finite(p.X, p.Y) {
			d = append(d, opts.CustomData{Value: []float64{sig(p.X), sig(p.Y)}})
		}
	}
	return d
}

// errBar is one error bar item: [x, y, xlo, xhi, ylo, yhi].
func errBar(name string, x, y, xlo, xhi, ylo, yhi float64) opts.CustomData {
	return opts.CustomData{Name: name, Value: []float64{sig(x), sig(y), sig(xlo), sig(xhi), sig(ylo), sig(yhi)}}
}

// Legend icons drawn as filled paths, for the custom series whose default
// legend icon would be a plain block of colour.
const (
	iconErrBar = "path://M5,0h2v16h-2z M1,0h10v2h-10z M1,14h10v2h-10z"
	iconSpan   = "path://M4.5,0h3v16h-3z"
)

// entry is one legend item: a series name and how its icon is drawn.
type entry struct {
	name string
	icon string // a legend icon; "" for the series' own
	line bool   // a line series: hide the symbol echarts draws on its icon
}

// legend lists the series in order with their icons.
func legend(es ...entry) charts.GlobalOpts {
	data := make([]map[string]any, len(es))
	for i, e := range es {
		data[i] = map[string]any{"name": e.name}
		if e.icon != "" {
			data[i]["icon"] = e.icon
		}
		if e.line {
			// echarts draws a circle on a line's icon even with no symbol.
			data[i]["itemStyle"] = map[string]any{"opacity": 0}
		}
	}
	return charts.WithLegendOpts(opts.Legend{Show: opts.Bool(true), Top: "4", Data: data})
}

// missing is echarts' marker for an empty value in a one-dimensional series.
const missing = "-"

func yValue(v float64) any {
	if !finite(v) {
		return missing
	}
	return sig(v)
}

func base(id string, w, h int, extra ...charts.GlobalOpts) *charts.Line {
	l := charts.NewLine()
	l.SetGlobalOptions(
		charts.WithInitializationOpts(opts.Initialization{ChartID: id, Width: fmt.Sprintf("%dpx", w), Height: fmt.Sprintf("%dpx", h), Theme: "white"}),
		charts.WithAnimation(false),
		charts.WithColorsOpts(palette()),
		charts.WithTooltipOpts(opts.Tooltip{Show: opts.Bool(true), Trigger: "item"}),
	)
	l.SetGlobalOptions(extra...)
	return l
}

func finish(l *charts.Line, id, caption string, w, h int) chart {
	l.Validate()
	return chart{ID: id, W: w, H: h, Caption: caption, Option: l.JSON()}
}

func seriesColor(c string) charts.SeriesOpts {
	return charts.WithItemStyleOpts(opts.ItemStyle{Color: c})
}

func custom(kind string, enc opts.Encode) []charts.SeriesOpts {
	return []charts.SeriesOpts{
		// A plain name for assets/report.js, not go-echarts' raw-JS marker.
		charts.WithCustomChartOpts(opts.CustomChart{RenderItem: types.FuncStr(kind)}),
		charts.WithEncodeOpts(enc),
	}
}

// branchChart draws one branch: design curve, fitted curve with its band,
// and the readings with error bars.
func branchChart(id string, b *Branch, in *Input) chart {
	sub := Clean(strings.Join(b.Flags, "; "))
	l := base(id, smallW, smallH,
		charts.WithTitleOpts(opts.Title{
			Title: Clean(b.ID), Subtitle: sub, Left: "center",
			TitleStyle:    &opts.TextStyle{FontSize: 13, Color: colBlack, Width: smallW - 16, Overflow: "truncate"},
			SubtitleStyle: &opts.TextStyle{FontSize: 11, Color: colVermillion, Width: smallW - 16, Overflow: "truncate"},
		}),
		charts.WithLegendOpts(opts.Legend{Show: opts.Bool(false)}),
		charts.WithGridOpts(opts.Grid{Left: "54", Right: "18", Top: "50", Bottom: "40"}),
		charts.WithXAxisOpts(opts.XAxis{Type: "value", Name: Clean("flow, " + in.FlowUnit), NameLocation: "middle", NameGap: 24, Scale: opts.Bool(false)}),
		charts.WithYAxisOpts(branchYAxis(b, in)),
	)
	// The band goes first so that it lies under everything else.
	band := charts.NewCustom()
	band.AddSeries("fit, 95 % band", bandData(b.FitLow, b.FitHigh),
		append(custom(renderBand, opts.Encode{X: 0, Y: 1}), seriesColor(colSky))...)
	l.Overlap(band)
	l.AddSeries("design", lineData(b.DesignCurve),
		charts.WithLineChartOpts(opts.LineChart{Symbol: "none", ShowSymbol: opts.Bool(false)}),
		charts.WithLineStyleOpts(opts.LineStyle{Color: colBlack, Width: 1.5, Type: "dashed"}),
		seriesColor(colBlack))
	l.AddSeries("fitted", lineData(b.FitCurve),
		charts.WithLineChartOpts(opts.LineChart{Symbol: "none", ShowSymbol: opts.Bool(false)}),
		charts.WithLineStyleOpts(opts.LineStyle{Color: colBlue, Width: 2}),
		seriesColor(colBlue))
	bars := charts.NewCustom()
	var barData []opts.CustomData
	pts := charts.NewScatter()
	var ptData []opts.ScatterData
	for _, p := range b.Measured {
		if !finite(p.X, p.Y) {
			continue
		}
		name := Clean(p.Label)
		xe, ye := p.XErr, p.YErr
		if !finite(xe) {
			xe = 0
		}
		if !finite(ye) {
			ye = 0
		}
		barData = append(barData, errBar(name, p.X, p.Y, p.X-xe, p.X+xe, p.Y-ye, p.Y+ye))
		ptData = append(ptData, opts.ScatterData{Name: name, Value: []float64{sig(p.X), sig(p.Y)}})
	}
	bars.AddSeries("reading uncertainty", barData,
		append(custom(renderErrBar, opts.Encode{X: []int{0, 2, 3}, Y: []int{1, 4, 5}}), seriesColor(colVermillion))...)
	pts.AddSeries("reading", ptData,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "circle", SymbolSize: 8}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colVermillion, BorderColor: "#ffffff", BorderWidth: 1}))
	l.Overlap(bars, pts)
	return finish(l, id, "", smallW, smallH)
}

// branchYAxis scales a branch chart's differential axis to what matters:
// the readings with their error bars and the design curve up to the design
// flow and the readings' flows. A fitted curve of a badly
// restricted branch can run to many times that at the chart's right edge;
// it is cut at the top rather than squashing the readings into the floor.
func branchYAxis(b *Branch, in *Input) opts.YAxis {
	ax := opts.YAxis{Type: "value", Name: Clean("Δp, " + in.PressureUnit), NameLocation: "middle", NameGap: 42}
	top := 0.0
	xs := []float64{b.Design}
	for _, p := range b.Measured {
		if finite(p.X, p.Y) {
			xs = append(xs, p.X)
			e := p.YErr
			if !finite(e) {
				e = 0
			}
			top = math.Max(top, p.Y+e)
		}
	}
	for _, x := range xs {
		if y := yAt(b.DesignCurve, x); finite(y) {
			top = math.Max(top, y)
		}
	}
	if top > 0 {
		ax.Max = niceCeil(1.25 * top)
	}
	return ax
}

// yAt interpolates curve c (in increasing X) linearly at x; NaN outside it.
func yAt(c []XY, x float64) float64 {
	for i := 1; i < len(c); i++ {
		a, b := c[i-1], c[i]
		if finite(a.X, a.Y, b.X, b.Y) && a.X <= x && x <= b.X {
			if b.X == a.X {
				return b.Y
			}
			return a.Y + (b.Y-a.Y)*(x-a.X)/(b.X-a.X)
		}
	}
	return math.NaN()
}

// niceCeil rounds v up to 1, 1.5, 2, 2.5, 3, 4, 5, 6, 8 or 10 times a power
// of ten, so the axis ends on a round number.
func niceCeil(v float64) float64 {
	if !(v > 0) || !finite(v) {
		return v
	}
	p := math.Pow(10, math.Floor(math.Log10(v)))
	for _, m := range []float64{1, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10} {
		if m*p >= v*(1-1e-12) {
			return sig(m * p)
		}
	}
	return 10 * p
}

// pickBranches returns the indices of the branches that get their own
// chart, in input order: all of them up to maxSmall, otherwise the flagged
// ones first and then those furthest from design before balancing.
func pickBranches(bs []Branch) []int { return pickN(bs, maxSmall) }

// pickN returns the indices, in input order, of at most n branches: all of
// them when there are no more, otherwise the flagged ones first and then
// those furthest from design before balancing.
func pickN(bs []Branch, n int) []int {
	idx := make([]int, len(bs))
	for i := range idx {
		idx[i] = i
	}
	if len(bs) <= n {
		return idx
	}
	score := func(i int) float64 {
		s := 0.0
		if len(bs[i].Flags) > 0 {
			s = 1e9
		}
		if d := pct(bs[i].Before, bs[i].Design); finite(d) {
			s += math.Abs(d - 100)
		}
		return s
	}
	sort.SliceStable(idx, func(a, b int) bool { return score(idx[a]) > score(idx[b]) })
	idx = idx[:n]
	sort.Ints(idx)
	return idx
}

// combinedChart draws the system curves of the parallel branches, the pump
// curves and the operating points before and after.
func combinedChart(id string, in *Input) chart {
	c := &in.Combined
	l := base(id, wideW, wideH,
		legend(
			entry{name: "system as found", line: true}, entry{name: "system after plan", line: true},
			entry{name: "pump as found", line: true}, entry{name: "pump after plan", line: true},
			entry{name: "operating point as found"}, entry{name: "operating point after plan"},
		),
		charts.WithGridOpts(opts.Grid{Left: "64", Right: "28", Top: "56", Bottom: "48"}),
		charts.WithXAxisOpts(opts.XAxis{Type: "value", Name: Clean("total flow, " + in.FlowUnit), NameLocation: "middle", NameGap: 28}),
		charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: Clean("Δp, " + in.PressureUnit), NameLocation: "middle", NameGap: 44}),
	)
	curve := func(name string, d []XY, col, typ string, w float32) {
		l.AddSeries(name, lineData(d),
			charts.WithLineChartOpts(opts.LineChart{Symbol: "none", ShowSymbol: opts.Bool(false)}),
			charts.WithLineStyleOpts(opts.LineStyle{Color: col, Width: w, Type: typ}),
			seriesColor(col))
	}
	curve("system as found", c.System, colBlue, "dashed", 1.5)
	curve("system after plan", c.SystemAfter, colBlue, "solid", 2)
	curve("pump as found", c.PumpBefore, colPump, "dashed", 1.5)
	curve("pump after plan", c.PumpAfter, colPump, "solid", 2)
	op := charts.NewScatter()
	// The two points are labelled on opposite sides, each on a white
	// ground, so that neither label sits on the other or on a curve's line.
	point := func(name, label string, p XY, sym string, col string, size int, pos string) {
		var d []opts.ScatterData
		if finite(p.X, p.Y) {
			d = append(d, opts.ScatterData{Name: name, Value: []float64{sig(p.X), sig(p.Y)}})
		}
		op.AddSeries(name, d,
			charts.WithScatterChartOpts(opts.ScatterChart{Symbol: sym, SymbolSize: size}),
			charts.WithItemStyleOpts(opts.ItemStyle{Color: col, BorderColor: col, BorderWidth: 2}),
			charts.WithLabelOpts(opts.Label{Show: opts.Bool(true), Position: pos, Formatter: label, Color: col,
				BackgroundColor: "#ffffff", FontWeight: "bold"}))
	}
	posB, posA := "left", "right"
	if finite(c.OpBefore.X, c.OpAfter.X) && c.OpBefore.X > c.OpAfter.X {
		posB, posA = "right", "left"
	}
	point("operating point as found", "as found", c.OpBefore, "emptyCircle", colAsFound, 13, posB)
	point("operating point after plan", "after plan", c.OpAfter, "diamond", colGreen, 15, posA)
	l.Overlap(op)
	return finish(l, id, "", wideW, wideH)
}

// categoryAxis sets up a branch-per-category x axis that stays readable
// from 1 to thousands of branches.
func categoryAxis(l *charts.Line, labels []string) {
	// Unrotated labels share the plot width; rotated ones get a fixed length.
	rotate, width, overflow := 0.0, 120, "truncate"
	if len(labels) > 10 {
		rotate = 45
	} else if len(labels) > 0 {
		width, overflow = (wideW-92)/len(labels)-8, "break"
	}
	l.SetXAxis(labels)
	l.SetGlobalOptions(charts.WithXAxisOpts(opts.XAxis{
		Type:      "category",
		AxisLabel: &opts.AxisLabel{Interval: "0", Rotate: rotate, Width: width, Overflow: overflow, HideOverlap: opts.Bool(true)},
	}))
	if len(labels) > maxWindow {
		end := float32(100 * float64(maxWindow) / float64(len(labels)))
		l.SetGlobalOptions(charts.WithDataZoomOpts(
			opts.DataZoom{Type: "slider", Start: 0, End: end, XAxisIndex: []int{0}, Throttle: 50},
			opts.DataZoom{Type: "inside", Start: 0, End: end, XAxisIndex: []int{0}},
		))
	}
}

func categoryGrid(n int) charts.GlobalOpts {
	bottom := "40"
	if n > 10 {
		bottom = "96"
	}
	if n > maxWindow {
		bottom = "128"
	}
	return charts.WithGridOpts(opts.Grid{Left: "64", Right: "28", Top: "56", Bottom: bottom})
}

// flowChart draws flow in percent of design per branch before and after,
// with the tolerance band shaded and the 95 % interval of after.
func flowChart(id string, in *Input) chart {
	n := len(in.Branches)
	labels := make([]string, n)
	before := make([]opts.ScatterData, n)
	after := make([]opts.ScatterData, n)
	var bars []opts.CustomData
	for i := range in.Branches {
		b := &in.Branches[i]
		labels[i] = Clean(b.ID)
		before[i] = opts.ScatterData{Name: labels[i], Value: yValue(pct(b.Before, b.Design))}
		after[i] = opts.ScatterData{Name: labels[i], Value: yValue(pct(b.After, b.Design))}
		a, lo, hi := pct(b.After, b.Design), pct(b.AfterLow, b.Design), pct(b.AfterHigh, b.Design)
		if finite(a, lo, hi) {
			x := float64(i)
			bars = append(bars, errBar(labels[i], x, a, x, x, lo, hi))
		}
	}
	lo, hi := 100+in.ToleranceLow, 100+in.ToleranceHigh
	l := base(id, wideW, wideH,
		legend(entry{name: "as found"}, entry{name: "after plan"}, entry{name: "after plan, 95 % interval", icon: iconErrBar}),
		categoryGrid(n),
		charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: "flow, % of design", NameLocation: "middle", NameGap: 44, Scale: opts.Bool(true)}),
	)
	categoryAxis(l, labels)
	sc := charts.NewScatter()
	sc.AddSeries("as found", before,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "emptyCircle", SymbolSize: 10}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colAsFound, BorderColor: colAsFound, BorderWidth: 2}),
		toleranceBand(lo, hi, "design"))
	cu := charts.NewCustom()
	cu.AddSeries("after plan, 95 % interval", bars,
		append(custom(renderErrBar, opts.Encode{X: 0, Y: []int{1, 4, 5}}), seriesColor(colGreen))...)
	sa := charts.NewScatter()
	sa.AddSeries("after plan", after,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "diamond", SymbolSize: 11}),
		seriesColor(colGreen))
	l.Overlap(sc, cu, sa)
	return finish(l, id, "", wideW, wideH)
}

// ratioChart draws the fitted resistance over the design resistance per
// branch with its 95 % interval; flagged branches get a triangle.
func ratioChart(id string, in *Input) chart {
	n := len(in.Branches)
	labels := make([]string, n)
	plain := make([]opts.ScatterData, n)
	flagged := make([]opts.ScatterData, n)
	var bars []opts.CustomData
	for i := range in.Branches {
		b := &in.Branches[i]
		labels[i] = Clean(b.ID)
		plain[i] = opts.ScatterData{Name: labels[i], Value: missing}
		flagged[i] = opts.ScatterData{Name: labels[i], Value: missing}
		if len(b.Flags) > 0 {
			flagged[i] = opts.ScatterData{Name: Clean(b.ID + ": " + strings.Join(b.Flags, "; ")), Value: yValue(b.RatioFit)}
		} else {
			plain[i].Value = yValue(b.RatioFit)
		}
		if finite(b.RatioFit, b.RatioLow, b.RatioHigh) {
			x := float64(i)
			bars = append(bars, errBar(labels[i], x, b.RatioFit, x, x, b.RatioLow, b.RatioHigh))
		}
	}
	l := base(id, wideW, wideH,
		legend(entry{name: "fitted"}, entry{name: "fitted, flagged"}, entry{name: "95 % interval", icon: iconErrBar}),
		categoryGrid(n),
		charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: "fitted ÷ design resistance", NameLocation: "middle", NameGap: 44, Scale: opts.Bool(true)}),
	)
	categoryAxis(l, labels)
	cu := charts.NewCustom()
	cu.AddSeries("95 % interval", bars,
		append(custom(renderErrBar, opts.Encode{X: 0, Y: []int{1, 4, 5}}), seriesColor(colBlue),
			charts.WithSeriesOpts(func(s *charts.SingleSeries) {
				s.MarkLines = &opts.MarkLines{
					Data: []any{map[string]any{"name": "design", "yAxis": 1}},
					MarkLineStyle: opts.MarkLineStyle{
						Symbol:    []string{"none", "none"},
						LineStyle: &opts.LineStyle{Color: colBlack, Width: 1, Type: "dotted"},
						// No label: at the line's end it sat on the last branch's
						// bar; the section's intro names the dotted line.
						Label: &opts.Label{Show: opts.Bool(false)},
					},
				}
			}))...)
	sc := charts.NewScatter()
	sc.AddSeries("fitted", plain,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "circle", SymbolSize: 9}),
		seriesColor(colBlue))
	sc.AddSeries("fitted, flagged", flagged,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "triangle", SymbolSize: 13}),
		seriesColor(colVermillion))
	l.Overlap(cu, sc)
	return finish(l, id, "", wideW, wideH)
}

// valveCharts draws present and planned valve settings, one chart per
// setting unit in order of first appearance, since settings in different
// units cannot share an axis.
func valveCharts(idPrefix string, in *Input) []chart {
	var units []string
	groups := map[string][]int{}
	for i := range in.Branches {
		u := in.Branches[i].ValveUnit
		if _, ok := groups[u]; !ok {
			units = append(units, u)
		}
		groups[u] = append(groups[u], i)
	}
	var out []chart
	for k, u := range units {
		idx := groups[u]
		labels := make([]string, len(idx))
		now := make([]opts.ScatterData, len(idx))
		planned := make([]opts.ScatterData, len(idx))
		var spans []opts.CustomData
		have := false
		for j, i := range idx {
			b := &in.Branches[i]
			labels[j] = Clean(b.ID)
			now[j] = opts.ScatterData{Name: Clean(b.ID + ": " + b.SettingNow), Value: yValue(b.NowValue)}
			planned[j] = opts.ScatterData{Name: Clean(b.ID + ": " + b.SettingPlanned), Value: yValue(b.PlannedValue)}
			if finite(b.NowValue, b.PlannedValue) {
				x := float64(j)
				spans = append(spans, errBar("", x, b.PlannedValue, x, x, b.NowValue, b.PlannedValue))
			}
			have = have || finite(b.NowValue) || finite(b.PlannedValue)
		}
		if !have {
			continue
		}
		name := "setting"
		if u != "" {
			name = "setting, " + u
		}
		id := fmt.Sprintf("%s-%d", idPrefix, k+1)
		l := base(id, wideW, wideH,
			legend(entry{name: "now"}, entry{name: "planned"}, entry{name: "change", icon: iconSpan}),
			categoryGrid(len(idx)),
			charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: Clean(name), NameLocation: "middle", NameGap: 44}),
		)
		categoryAxis(l, labels)
		cu := charts.NewCustom()
		cu.AddSeries("change", spans, append(custom(renderSpan, opts.Encode{X: 0, Y: []int{1, 4, 5}}), seriesColor(colGrey))...)
		sc := charts.NewScatter()
		sc.AddSeries("now", now,
			charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "emptyCircle", SymbolSize: 10}),
			charts.WithItemStyleOpts(opts.ItemStyle{Color: colAsFound, BorderColor: colAsFound, BorderWidth: 2}))
		sc.AddSeries("planned", planned,
			charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "diamond", SymbolSize: 11}),
			seriesColor(colGreen))
		l.Overlap(cu, sc)
		out = append(out, finish(l, id, name, wideW, wideH))
	}
	return out
}

// toleranceBand shades the tolerance band lo..hi (% of the reference) behind
// a flow chart and draws the reference itself at 100 % as a dotted line named
// ref; nothing is drawn when either edge is not finite.
func toleranceBand(lo, hi float64, ref string) charts.SeriesOpts {
	return charts.WithSeriesOpts(func(s *charts.SingleSeries) {
		if !finite(lo, hi) {
			return
		}
		s.MarkAreas = &opts.MarkAreas{
			Data: []any{[]map[string]any{{"name": "tolerance", "yAxis": sig(lo)}, {"yAxis": sig(hi)}}},
			MarkAreaStyle: opts.MarkAreaStyle{
				ItemStyle: &opts.ItemStyle{Color: "rgba(0,158,115,0.13)"},
				Label:     &opts.Label{Show: opts.Bool(false)},
			},
		}
		s.MarkLines = &opts.MarkLines{
			Data: []any{map[string]any{"name": ref, "yAxis": 100}},
			MarkLineStyle: opts.MarkLineStyle{
				Symbol:    []string{"none", "none"},
				LineStyle: &opts.LineStyle{Color: colBlack, Width: 1, Type: "dotted"},
				Label:     &opts.Label{Show: opts.Bool(false)},
			},
		}
	})
}
