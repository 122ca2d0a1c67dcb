package synth

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"

	"flowset/internal/fluid"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// Limits of Generate.
const (
	MaxBranches = 100000
	MaxStates   = 10
)

// Generate draws a plausible design site from spec and a simulated survey of
// its hidden true plant, and returns the site as its sheets would give it
// and the truth. The same spec gives the same site and readings.
//
// The design: flows of 0.05-3 l/s (log-uniform; very large sites scaled down
// to 3 m3/s in all), copper or steel pipe sized for at most 1.2 m/s and 300 Pa/m, terminals
// of 10-40 kPa, some control valves, line-sized regulating valves from an
// invented family of handwheel tables, headers sized for the flow they carry
// (at most 1.5 m/s and 20-250 Pa/m), and a pump curve (or set point) 15 %
// above what the index circuit needs at design with every valve open. The
// as-found settings are not balanced: about 60 % of the valves fully open,
// the rest anywhere in the upper two thirds of their travel.
//
// With Spec.RiserTerminals the site is a building's: risers of about that
// many terminals on the main, each terminal a radiator (60 %: 0.05-0.2 l/s,
// 5-15 kPa), a fan coil (36 %: 0.1-0.5 l/s, 15-30 kPa) or an air-handler
// coil (4 %: 1-4 l/s, 20-40 kPa), all log-uniform (common practice, no
// source).
//
// The survey: readings by Spec.Readings, computed by plant.Solve on the true
// plant and given Gaussian noise of Spec.Noise times each instrument's
// standard uncertainty. A reading's Setting is what the handwheel shows,
// not where a mis-set or stuck valve really is; a valve-meter flow is what
// the meter computes from the differential at the tappings and the table at
// that setting.
func Generate(ctx context.Context, spec Spec) (*site.Site, *Truth, error) {
	spec, err := spec.normal()
	if err != nil {
		return nil, nil, err
	}
	rng := rand.New(rand.NewPCG(uint64(spec.Seed), 0x5eed5))
	kind, _ := fluid.ParseKind(spec.Fluid)
	fl, err := fluid.Spec{Kind: kind, Percent: spec.GlycolPercent}.At(spec.Temperature)
	if err != nil {
		return nil, nil, fmt.Errorf("fluid: %w: %w", err, ErrSpec)
	}
	s := &site.Site{
		Name: fmt.Sprintf("synthetic site %d (seed %d)", spec.Branches, spec.Seed), Fluid: kind.String(),
		GlycolPercent: spec.GlycolPercent, Temperature: spec.Temperature, Header: spec.Arrangement,
		Boundary: site.Boundary{Kind: spec.Boundary, Speed: 1, MaxSpeed: 1, SetPoint: math.NaN(), Sensor: site.AtPump},
		Hours:    8760, EnergyPrice: math.NaN(), PumpEfficiency: 0.7, MotorEfficiency: 0.9,
		ToleranceLow: -0.1, ToleranceHigh: 0.1,
	}
	d := &designer{spec: spec, rng: rng, fl: fl, s: s}
	if err := d.design(ctx); err != nil {
		return nil, nil, err
	}
	d.asFound()
	m, err := model(s)
	if err != nil {
		return nil, nil, fmt.Errorf("generated site: %w", err)
	}
	t := d.truth(m)
	states := d.plan(m, t)
	rs, err := survey(ctx, m, t, states, rng, surveyOpts{noise: spec.Noise})
	if err != nil {
		return nil, nil, err
	}
	s.Readings = rs
	return s, t, nil
}

// normal checks spec and fills its defaults.
func (spec Spec) normal() (Spec, error) {
	bad := func(format string, a ...any) (Spec, error) {
		return spec, fmt.Errorf(format+": %w", append(a, ErrSpec)...)
	}
	switch {
	case spec.Branches < 1 || spec.Branches > MaxBranches:
		return bad("%d branches, want 1 to %d", spec.Branches, MaxBranches)
	case spec.Arrangement < site.NoHeaderLoss || spec.Arrangement > site.ReverseReturn:
		return bad("unknown header arrangement %d", spec.Arrangement)
	case spec.Boundary < site.PumpCurve || spec.Boundary > site.MeasuredDiff:
		return bad("unknown boundary %d", spec.Boundary)
	case spec.RiserTerminals < 0 || spec.RiserTerminals > 1000:
		return bad("%d terminals a riser, want 0 to 1000", spec.RiserTerminals)
	case spec.States < 0 || spec.States > MaxStates:
		return bad("%d states, want 1 to %d", spec.States, MaxStates)
	case !(spec.Noise >= 0) || math.IsInf(spec.Noise, 0):
		return bad("noise scale %g, want 0 or more", spec.Noise)
	case !(spec.FaultSeverity >= 0) || spec.FaultSeverity > 5:
		return bad("fault severity %g, want 0 to 5", spec.FaultSeverity)
	case !(spec.Header >= 0) || !(spec.PumpHead >= 0) || spec.Header > 10 || spec.PumpHead > 10:
		return bad("true multipliers header %g and pump head %g, want 0 to 10", spec.Header, spec.PumpHead)
	}
	var sum float64
	for _, f := range []float64{spec.Fouled, spec.Free, spec.MisSet, spec.Stuck} {
		if !(f >= 0 && f <= 1) {
			return bad("fault fraction %g, want 0 to 1", f)
		}
		sum += f
	}
	if !(spec.Held >= 0 && spec.Held <= 1) || !(spec.Mislimited >= 0 && spec.Mislimited <= 1) {
		return bad("fractions %g on pressure-independent valves and %g of them mis-limited, want 0 to 1", spec.Held, spec.Mislimited)
	}
	if sum > 1+1e-12 {
		return bad("fault fractions add up to %g, more than 1", sum)
	}
	for _, f := range []float64{spec.Readings.ClampOn, spec.Readings.ValveMeter, spec.Readings.ValveDiff, spec.Readings.BranchDiff} {
		if !(f >= 0 && f <= 1) {
			return bad("reading fraction %g, want 0 to 1", f)
		}
	}
	if spec.Fluid == "" {
		spec.Fluid = "water"
	}
	kind, err := fluid.ParseKind(spec.Fluid)
	if err != nil {
		return bad("fluid %q", spec.Fluid)
	}
	if kind == fluid.PlainWater {
		spec.GlycolPercent = 0
	}
	if spec.Temperature == 0 {
		spec.Temperature = 273.15 + 70
		if kind != fluid.PlainWater {
			spec.Temperature = 273.15 + 10
		}
	}
	if spec.States == 0 {
		spec.States = 1
	}
	if spec.FaultSeverity == 0 {
		spec.FaultSeverity = 1
	}
	if spec.Header == 0 {
		spec.Header = 1
	}
	if spec.PumpHead == 0 {
		spec.PumpHead = 1
	}
	if spec.Readings == (ReadingMix{}) {
		spec.Readings = DefaultMix()
	}
	return spec, nil
}

// onStep rounds a setting to the handwheel's 0.1 turn within [lo, hi].
func onStep(x, lo, hi float64) float64 {
	return math.Min(hi, math.Max(lo, math.Round(x*10)/10))
}

// asFound records the settings found: about 60 % fully open, the rest in
// the upper two thirds of the travel.
func (d *designer) asFound() {
	for i := range d.s.Branches {
		b := &d.s.Branches[i]
		v := d.s.Valve(b.Valve)
		if v == nil {
			continue
		}
		lo, hi := v.Range()
		b.Setting = hi
		if d.rng.Float64() >= 0.6 {
			b.Setting = onStep(lo+(hi-lo)*(1.0/3+2.0/3*d.rng.Float64()), lo, hi)
		}
	}
}

// truth draws the hidden faults on the terminal branches.
func (d *designer) truth(m *plant.Model) *Truth {
	n := len(m.Branches)
	t := &Truth{Params: m.Design(), ActualSetting: make([]float64, n), Stuck: make([]float64, n), Faults: make([]string, n)}
	t.Params.Header, t.Params.PumpHead = d.spec.Header, d.spec.PumpHead
	if d.s.Boundary.Kind != site.PumpCurve {
		t.Params.PumpHead = 1 // no pump curve to scale
		t.Differential = d.s.Boundary.SetPoint
		if d.s.Boundary.Kind == site.MeasuredDiff {
			// Whatever holds the differential: the design need with margin.
			tmp := *d.s
			tmp.Boundary.Kind = site.ConstantDiff
			tmp.Boundary.SetPoint = 1
			if mm, err := model(&tmp); err == nil {
				t.Differential = math.Ceil(need(mm)*pumpMargin/100) * 100
			}
		}
	}
	for i := range t.ActualSetting {
		t.ActualSetting[i], t.Stuck[i] = math.NaN(), math.NaN()
	}
	sev := d.spec.FaultSeverity
	leaves := append([]int(nil), d.leaves...)
	d.rng.Shuffle(len(leaves), func(a, b int) { leaves[a], leaves[b] = leaves[b], leaves[a] })
	next := 0
	pick := func(frac float64) []int {
		k := min(int(math.Round(frac*float64(len(d.leaves)))), len(leaves)-next)
		out := leaves[next : next+k]
		next += k
		return out
	}
	for _, i := range pick(d.spec.Fouled) {
		t.Params.Resistance[i] = 1 + sev*(1+2*d.rng.Float64())
		t.Faults[i] = Fouled
	}
	for _, i := range pick(d.spec.Free) {
		t.Params.Resistance[i] = math.Max(0.1, 1-sev*(0.5+0.2*d.rng.Float64()))
		t.Faults[i] = Free
	}
	// mislimit makes branch i's pressure-independent valve pass k times its
	// table's flow, k 0.70-0.85 or 1.15-1.30 at severity 1.
	mislimit := func(i int) {
		k := 1 + sev*(0.15+0.15*d.rng.Float64())
		if d.rng.IntN(2) == 0 {
			k = 2 - k
		}
		t.Params.KvScale[i] = max(k, 0.1)
		t.Faults[i] = Mislimited
	}
	for _, i := range pick(d.spec.MisSet) {
		b := &m.Branches[i]
		if b.PI != nil {
			mislimit(i)
			continue
		}
		lo, hi := b.Valve.Range()
		rec := b.AsFound
		off := sev * (0.3 + 0.2*d.rng.Float64()) * (hi - lo)
		if d.rng.IntN(2) == 0 {
			off = -off
		}
		if rec+off < lo || rec+off > hi {
			off = -off
		}
		a := onStep(rec+off, lo, hi)
		if math.Abs(a-rec) < 0.1-1e-9 {
			// Too close to the mark to be a fault: put it at the far end.
			a = lo
			if rec-lo < hi-rec {
				a = hi
			}
		}
		t.ActualSetting[i] = a
		t.Faults[i] = MisSet
	}
	for _, i := range pick(d.spec.Stuck) {
		t.Stuck[i] = m.Branches[i].AsFound
		t.Faults[i] = Stuck
	}
	if d.spec.Mislimited > 0 {
		var held []int
		for _, i := range leaves[next:] {
			if m.Branches[i].PI != nil {
				held = append(held, i)
			}
		}
		var all int
		for _, i := range d.leaves {
			if m.Branches[i].PI != nil {
				all++
			}
		}
		for _, i := range held[:min(len(held), int(math.Round(d.spec.Mislimited*float64(all))))] {
			mislimit(i)
		}
	}
	return t
}

// plan lays out the survey: the same readings in every state, and in each
// state after the first the read mis-set and stuck valves and about a fifth
// of the other read valves moved by 15-40 % of their travel.
func (d *designer) plan(m *plant.Model, t *Truth) []stateDef {
	n := len(m.Branches)
	mix := d.spec.Readings
	choose := func(frac float64) []bool {
		sel := make([]bool, n)
		for _, i := range d.rng.Perm(n)[:int(math.Round(frac*float64(n)))] {
			sel[i] = true
		}
		return sel
	}
	clamp, meter, vdiff, bdiff := choose(mix.ClampOn), choose(mix.ValveMeter), choose(mix.ValveDiff), choose(mix.BranchDiff)
	if mix.Paired {
		for i := range m.Branches {
			meter[i] = meter[i] && m.Branches[i].Valve != nil
			clamp[i], vdiff[i] = !meter[i], meter[i]
		}
	}
	for i := range m.Branches {
		// A pressure-independent valve has no Kv table to meter by.
		meter[i] = meter[i] && (m.Branches[i].Valve != nil || m.Branches[i].PI == nil)
	}
	var takes []take
	read := make([]bool, n)
	for i := range m.Branches {
		id, valve := m.Branches[i].ID, m.Branches[i].HasValve()
		if clamp[i] {
			takes = append(takes, take{Where: id, What: site.Flow, Instrument: "clamp-on"})
		}
		if meter[i] && valve {
			takes = append(takes, take{Where: id, What: site.Flow, Instrument: "valve-meter"})
		}
		if vdiff[i] && valve {
			takes = append(takes, take{Where: id, What: site.ValveDiff, Instrument: "manometer"})
		}
		if bdiff[i] {
			takes = append(takes, take{Where: id, What: site.BranchDiff, Instrument: "manometer"})
		}
		read[i] = clamp[i] || bdiff[i] || valve && (meter[i] || vdiff[i])
	}
	if mix.HeaderDiff || d.s.Boundary.Kind == site.MeasuredDiff {
		takes = append(takes, take{Where: site.AtHeader, What: site.HeaderDiff, Instrument: "manometer"})
	}
	if mix.PumpDiff {
		takes = append(takes, take{Where: site.AtPump, What: site.PumpDiff, Instrument: "manometer"})
	}
	if mix.TotalFlow {
		takes = append(takes, take{Where: site.AtPump, What: site.TotalFlow, Instrument: "clamp-on"})
	}
	states := []stateDef{{Label: "as-found", Takes: takes}}
	cur := m.AsFound()
	for k := 2; k <= d.spec.States; k++ {
		sd := stateDef{Label: fmt.Sprintf("state-%d", k), Takes: takes}
		for i := range m.Branches {
			b := &m.Branches[i]
			if !b.HasValve() || !read[i] {
				continue
			}
			if t.Faults[i] != MisSet && t.Faults[i] != Stuck && d.rng.Float64() >= 0.2 {
				continue
			}
			lo, hi := b.Range()
			step := (0.15 + 0.25*d.rng.Float64()) * (hi - lo)
			if d.rng.IntN(2) == 0 {
				step = -step
			}
			if cur[i]+step < lo || cur[i]+step > hi {
				step = -step
			}
			set := onStep(cur[i]+step, lo, hi)
			if set == cur[i] {
				continue
			}
			cur[i] = set
			sd.Moves = append(sd.Moves, move{ID: b.ID, Setting: set})
		}
		states = append(states, sd)
	}
	return states
}
