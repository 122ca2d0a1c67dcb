package cli

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
)

type curvesOptions struct {
	Site   string
	Format string
	State  string
}

func newCurvesCmd(ios *IO) *cobra.Command {
	opts := &curvesOptions{}
	cmd := &cobra.Command{
		Use:   "curves SITE",
		Short: "Print each branch's system curve and the combined curve with the pump",
		Long: `Curves prints, from the design model of a site, each branch's system curve
(differential across the branch against flow, its valve at the setting of the
chosen survey state), the combined curve of all branches seen from the pump
with header losses included, the pump curve, and the operating point.`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.Site = args[0]
			switch opts.Format {
			case "table", "csv", "json":
			default:
				return usagef("--format %q: want table, csv or json", opts.Format)
			}
			return runCurves(cmd.Context(), ios, opts)
		},
	}
	cmd.Flags().StringVar(&opts.Format, "format", "table", "output format: table, csv or json")
	cmd.Flags().StringVar(&opts.State, "state", "", "survey state whose valve settings to use (default: the first)")
	return cmd
}

// curveSet is what curves prints, in display units (l/s, kPa).
type curveSet struct {
	Site      string         `json:"site"`
	State     string         `json:"state"`
	Fractions []float64      `json:"fractions_of_design"`
	Branches  []branchCurve  `json:"branches"`
	System    []displayPoint `json:"system"`
	Pump      []displayPoint `json:"pump,omitempty"`
	Operating displayPoint   `json:"operating_point"`
	// StaticLift is an open circuit's static head, kPa, where the system
	// curve starts; 0 for a closed loop.
	StaticLift float64 `json:"static_lift_kPa,omitempty"`
	// Pumps names the pumps whose combined curve is drawn, for a site of
	// several pumps.
	Pumps string `json:"pumps,omitempty"`
	// Controllers are the risers' differential controllers: a controlled
	// riser's curve follows its controller's valve wide open in series
	// with its span up to the held flow, and stands at that flow above.
	Controllers []controllerCurve `json:"differential_controllers,omitempty"`
}

// controllerCurve is where a riser's differential controller starts to
// hold, in display units (l/s, kPa).
type controllerCurve struct {
	ID       string  `json:"riser"`
	SetPoint float64 `json:"set_point_kPa"`
	Held     float64 `json:"held_flow_l_s"`
	Starts   float64 `json:"holds_from_riser_differential_kPa"`
	// Span and Holding are at the operating point.
	Span    float64 `json:"span_differential_kPa"`
	Holding bool    `json:"holding"`
}

type branchCurve struct {
	ID     string         `json:"branch"`
	Design float64        `json:"design_flow_l_s"`
	Points []displayPoint `json:"points"`
	// Held is the flow a pressure-independent valve holds at its setting,
	// l/s (0 for none): no differential passes more, so points above it
	// only show how stiffly the model's regulator holds.
	Held float64 `json:"held_flow_l_s,omitempty"`
}

type displayPoint struct {
	Flow float64 `json:"flow_l_s"`
	Diff float64 `json:"diff_kPa"`
}

func disp(p plant.Point) displayPoint { return displayPoint{p.Flow * 1000, p.Diff / 1000} }

func runCurves(ctx context.Context, ios *IO, opts *curvesOptions) error {
	l, err := loadSite(ctx, opts.Site, ios.Err)
	if err != nil {
		return err
	}
	m := l.Model
	st := m.BaseState()
	if len(m.States) > 0 {
		st = m.States[0]
	}
	if opts.State != "" {
		found := false
		for _, s := range m.States {
			if s.Label == opts.State {
				st, found = s, true
			}
		}
		if !found {
			return usagef("--state %q: the site's states are %q", opts.State, m.StateLabels())
		}
	}
	cs, err := computeCurves(ctx, m, st)
	if err != nil {
		return &dataError{err}
	}
	cs.Site = l.Site.Name
	switch opts.Format {
	case "json":
		enc := json.NewEncoder(ios.Out)
		enc.SetIndent("", "  ")
		return enc.Encode(cs)
	case "csv":
		return writeCurvesCSV(ios.Out, cs)
	}
	return writeCurvesTable(ios.Out, cs)
}

func computeCurves(ctx context.Context, m *plant.Model, st plant.State) (*curveSet, error) {
	p := m.Design()
	cs := &curveSet{State: st.Label, Fractions: []float64{0.25, 0.5, 0.75, 1, 1.25, 1.5}}
	for i, b := range m.Branches {
		if b.Riser() {
			continue
		}
		flows := make([]float64, len(cs.Fractions))
		for k, f := range cs.Fractions {
			flows[k] = f * b.Design
		}
		bc := branchCurve{ID: b.ID, Design: b.Design * 1000}
		if b.PI != nil {
			if v, err := b.PI.At(st.Settings[i], p.KvScale[i]); err == nil {
				bc.Held = v.Flow * 1000
			}
		}
		for _, pt := range m.BranchCurve(p, i, st.Settings[i], flows) {
			bc.Points = append(bc.Points, disp(pt))
		}
		cs.Branches = append(cs.Branches, bc)
	}
	op, err := m.Solve(ctx, p, st)
	if err != nil {
		return nil, err
	}
	cs.Operating = displayPoint{op.TotalFlow() * 1000, op.PumpDiff() / 1000}
	for i := range m.Branches {
		c, ok := op.ControllerElement(i)
		if !ok {
			continue
		}
		open, _ := hydraulics.KvDrop(c.Hold, c.Kvs, m.Fluid.Density)
		if l := op.Built.Branch[m.Branches[i].ID]; l >= 0 && m.Branches[i].Controller.Below() {
			// Its riser's own parts lie outside the span it holds.
			for _, e := range op.Built.Net.Elements(l) {
				d, _ := e.Drop(c.Hold, m.Fluid)
				open += d
			}
		}
		span, _ := op.ControlledDiff(i)
		cs.Controllers = append(cs.Controllers, controllerCurve{ID: m.Branches[i].ID, SetPoint: c.SetPoint / 1000, Held: c.Hold * 1000,
			Starts: (c.SetPoint + open) / 1000, Span: span / 1000, Holding: span >= c.SetPoint*(1-1e-3)})
	}
	top := 1.5 * op.PumpDiff()
	if m.PumpDriven() {
		speed := st.Speed
		if m.Controlled() {
			speed = m.MaxSpeed() // the curve drawn is the drive's limit
		}
		top = math.Max(top, m.Set(1, st.Running).AtSpeed(speed).ShutOff()*m.Fluid.Density*9.80665)
	}
	const n = 10
	diffs := make([]float64, n+1)
	lift := m.Lift()
	if !(lift < top) {
		lift = 0
	}
	cs.StaticLift = m.Lift() / 1000
	for k := range diffs {
		// An open circuit's curve starts at its static lift, at no flow.
		diffs[k] = lift + (top-lift)*float64(k)/n
	}
	sys, err := m.SystemCurve(ctx, p, st.Settings, diffs)
	if err != nil {
		return nil, err
	}
	flows := make([]float64, len(sys))
	for k, pt := range sys {
		cs.System = append(cs.System, disp(pt))
		flows[k] = pt.Flow
	}
	if m.Several() && m.PumpDriven() {
		n := st.Running
		if n <= 0 || n > len(m.PumpIDs) {
			n = len(m.PumpIDs)
		}
		how := "in parallel: flows added at equal head, each pump only below its shut-off head"
		if m.Series {
			how = "in series: heads added at equal flow"
		}
		cs.Pumps = fmt.Sprintf("%s %s", joinIDs(pumpNames(m.PumpIDs[:n])), how)
		if n < len(m.PumpIDs) {
			cs.Pumps += fmt.Sprintf(" (%s standing by)", joinIDs(pumpNames(m.PumpIDs[n:])))
		}
	}
	for _, pt := range m.PumpCurve(p, st.Speed, st.Running, flows) {
		cs.Pump = append(cs.Pump, disp(pt))
	}
	return cs, nil
}

func writeCurvesTable(w io.Writer, cs *curveSet) error {
	fmt.Fprintf(w, "system curves of %s\nvalves at their settings in state %q\n\n", cs.Site, cs.State)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(tw, "branch\tdesign\t")
	for _, f := range cs.Fractions {
		fmt.Fprintf(tw, "%.0f%%\t", f*100)
	}
	fmt.Fprintln(tw)
	fmt.Fprint(tw, "\t[l/s]\t")
	for range cs.Fractions {
		fmt.Fprint(tw, "[kPa]\t")
	}
	fmt.Fprintln(tw)
	held := false
	for _, b := range cs.Branches {
		fmt.Fprintf(tw, "%s\t%.3f\t", b.ID, b.Design) // whole: no cut cells
		for _, p := range b.Points {
			if b.Held > 0 && p.Flow > b.Held*1.001 {
				fmt.Fprint(tw, "held\t")
				held = true
				continue
			}
			fmt.Fprintf(tw, "%.1f\t", p.Diff)
		}
		fmt.Fprintln(tw)
	}
	tw.Flush()
	fmt.Fprintln(w, "\nbranch differential at a % of its design flow")
	if held {
		fmt.Fprintln(w, "held: the branch's pressure-independent valve holds a lower flow at its setting; no differential passes this much")
	}
	fmt.Fprintln(w, "\ncombined curve seen from the pump (header losses included)")
	if cs.Pumps != "" {
		fmt.Fprintf(w, "pump curve of %s\n", cs.Pumps)
	}
	if cs.StaticLift > 0 {
		fmt.Fprintf(w, "open circuit: the system curve starts at the static lift, %.1f kPa at no flow\n", cs.StaticLift)
	}
	tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "flow [l/s]\tsystem [kPa]\tpump [kPa]\t")
	for k, p := range cs.System {
		pump := "-"
		if k < len(cs.Pump) {
			pump = strconv.FormatFloat(cs.Pump[k].Diff, 'f', 1, 64)
		}
		fmt.Fprintf(tw, "%.3f\t%.1f\t%s\t\n", p.Flow, p.Diff, pump)
	}
	tw.Flush()
	fmt.Fprintf(w, "\noperating point: %.3f l/s at %.1f kPa\n", cs.Operating.Flow, cs.Operating.Diff)
	if len(cs.Controllers) > 0 {
		fmt.Fprintln(w, "\ndifferential controllers: each holds its span (partner valve and branches) at its set point once its riser gets the set point plus its valve's wide-open drop; below that it lies wide open")
		tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintln(tw, "riser	set point [kPa]	held flow [l/s]	holds from [kPa]	span now [kPa]	now	")
		for _, c := range cs.Controllers {
			now := "wide open"
			if c.Holding {
				now = "holding"
			}
			fmt.Fprintf(tw, "%s	%.1f	%.3f	%.1f	%.1f	%s	\n", c.ID, c.SetPoint, c.Held, c.Starts, c.Span, now)
		}
		tw.Flush()
	}
	return nil
}

func writeCurvesCSV(w io.Writer, cs *curveSet) error {
	cw := csv.NewWriter(w)
	row := func(kind, id string, p displayPoint) {
		cw.Write([]string{kind, id, ff(p.Flow), ff(p.Diff)})
	}
	cw.Write([]string{"curve", "branch", "flow [l/s]", "differential [kPa]"})
	for _, b := range cs.Branches {
		for _, p := range b.Points {
			row("branch", safeCell(b.ID), p)
		}
	}
	for _, p := range cs.System {
		row("system", "", p)
	}
	for _, p := range cs.Pump {
		row("pump", "", p)
	}
	row("operating point", "", cs.Operating)
	for _, c := range cs.Controllers {
		// Where the controlled riser's curve turns: its held flow at the
		// riser differential from which it holds.
		row("controller holds from", safeCell(c.ID), displayPoint{c.Held, c.Starts})
	}
	cw.Flush()
	return cw.Error()
}

func ff(x float64) string { return strconv.FormatFloat(x, 'g', 6, 64) }

// safeCell neutralises a user string that a spreadsheet would take as a
// formula (OWASP, "CSV Injection"): a cell starting with = + - @ tab or
// carriage return gets a leading apostrophe.
func safeCell(s string) string {
	if s == "" {
		return s
	}
	switch s[0] {
	case '=', '+', '-', '@', '\t', '\r':
		return "'" + s
	}
	return s
}
