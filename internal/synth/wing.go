package synth

import (
	"context"
	"math"
	"math/rand/v2"

	"flowset/internal/site"
	"flowset/internal/units"
)

// The third example site is entered in US customary units: its schedule
// below is typed in gpm, ft, psi and degF and written out in those units
// (site.WriteDirIn with site.SheetsUS), so the sheets print every number as
// typed here.

func gpm(x float64) float64  { return in(units.Flow, "gpm", x) }
func psi(x float64) float64  { return in(units.Pressure, "psi", x) }
func feet(x float64) float64 { return in(units.Length, "ft", x) }
func headFt(x float64) float64 {
	return in(units.Head, "ft", x)
}

// kvOfCv returns the Kv that the sheets' Cv columns print as cv: the double
// nearest cv·KvPerCv whose quotient by KvPerCv is cv again.
func kvOfCv(cv float64) float64 {
	v := cv * site.KvPerCv
	up, down := v, v
	for range 8 {
		if up/site.KvPerCv == cv {
			return up
		}
		if down/site.KvPerCv == cv {
			return down
		}
		up, down = math.Nextafter(up, math.Inf(1)), math.Nextafter(down, math.Inf(-1))
	}
	return v
}

// usLawValve is lawValve with its table in Cv: the same stated opening law
// (Cv = Cvs·0.03^((1-x)^1.3) at the fraction x of the turns, eight points,
// three significant figures of Cv), for sheets written in Cv.
func usLawValve(name string, cvs, turns float64) site.ValveModel {
	vm := site.ValveModel{Name: name, Unit: "turns", Step: 0.1, MinDiff: psi(0.5), Rangeability: math.NaN(), Kvs: math.NaN()}
	for k := 1; k <= 8; k++ {
		s := turns * float64(k) / 8
		vm.Settings = append(vm.Settings, s)
		vm.Kv = append(vm.Kv, kvOfCv(sigFigs(cvs*math.Pow(0.03, math.Pow(1-s/turns, 1.3)), 3)))
	}
	return vm
}

// wingHeld is the wing's pressure-independent valve model: not typed from
// any catalogue but drawn from a stated law (0.75 gpm per step, steps 1 to
// 10 in half steps, holding from 3 psi; its Cv below that left for the
// model to derive).
func wingHeld() site.ValveModel {
	vm := site.ValveModel{Name: "PH34", Unit: "steps", Step: 0.5, MinDiff: psi(0.5), HoldDiff: psi(3),
		Kvs: math.NaN(), Rangeability: math.NaN()}
	for s := 1.0; s <= 10; s++ {
		vm.Settings = append(vm.Settings, s)
		vm.MaxFlow = append(vm.MaxFlow, gpm(0.75*s))
		vm.Kv = append(vm.Kv, math.NaN())
	}
	return vm
}

// wingBranch is one row of the wing's schedule, in the sheets' US units.
type wingBranch struct {
	id, parent string
	flow       float64 // gpm
	size       string  // ASME B36.10 schedule 40, nominal inches
	length, k  float64 // ft, flow and return; fittings
	terminal   float64 // psi
	valve      string
	setting    float64 // turns or steps, as found
	controlCv  float64 // Cv of a control valve held open, 0 for none
	header     float64 // header or riser segment, ft, supply and return alike
	hsize      string
	note       string
}

func (w wingBranch) branch() site.Branch {
	nan := math.NaN()
	b := site.Branch{ID: w.id, Parent: w.parent, DesignFlow: gpm(w.flow), PipeStandard: "sch40", PipeSize: w.size, PipeBore: nan,
		PipeLength: feet(w.length), Roughness: nan, FittingsK: w.k, TerminalDrop: psi(w.terminal), TerminalFlow: nan,
		Valve: w.valve, Setting: w.setting, SupplyLength: feet(w.header), ReturnLength: feet(w.header),
		HeaderStandard: "sch40", HeaderSize: w.hsize, HeaderBore: nan, HeaderK: 1, Note: w.note}
	if w.controlCv > 0 {
		b.ControlKvs = kvOfCv(w.controlCv)
	}
	return b
}

// Wing returns the third example site, surveys/wing, and its hidden truth:
// the chilled-water circuit of an invented hospital's east wing, Wrenholt
// Infirmary, entered in US customary units. Two air-handler coils on
// handwheel valves, and two risers of fan coils on pressure-independent
// valves, the north riser held by a differential-pressure controller with
// its partner valve; direct-return headers; two identical pumps in parallel
// (duty/assist) on one drive. Two survey states: as found with both pumps
// running, and with the assist pump stopped after the technician closed
// AHU-1 down.
//
// The hidden truth: AHU-2's coil is fouled (2.5 times design); the far fan
// coil on the south riser, FC-S4, has a blocked strainer (its fixed parts 3
// times design), so its pressure-independent valve is starved below its
// hold differential; the north riser's controller holds 0.75 of the set
// point recorded for it (16 psi recorded, 12 psi held).
func Wing(ctx context.Context) (*site.Site, *Truth, error) {
	nan := math.NaN()
	var pump []site.PumpPoint
	for _, id := range []string{"P1", "P2"} {
		for _, pt := range [][2]float64{{0, 62}, {60, 60}, {120, 54}, {180, 44}} {
			pump = append(pump, site.PumpPoint{Pump: id, Flow: gpm(pt[0]), Head: headFt(pt[1]), Speed: nan, Efficiency: nan})
		}
	}
	s := &site.Site{
		Name: "Wrenholt Infirmary - east wing chilled water", Fluid: "water", Temperature: in(units.Temperature, "degF", 44),
		Header:   site.DirectReturn,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan, Sensor: site.AtPump},
		Hours:    4000, EnergyPrice: 0.14, Currency: "USD", PumpEfficiency: pct(65), MotorEfficiency: pct(90),
		ToleranceLow: pct(-10), ToleranceHigh: pct(10), Units: "us",
		Valves: []site.ValveModel{usLawValve("BV3", 70, 8), usLawValve("BV15", 20, 5), wingHeld()},
		Pump:   pump, PumpsRunning: 2,
	}
	fc := func(id, parent string, q, length, setting float64, hsize, note string) wingBranch {
		return wingBranch{id: id, parent: parent, flow: q, size: "3/4", length: length, k: 8, terminal: 3, valve: "PH34",
			setting: setting, header: 12, hsize: hsize, note: note}
	}
	rows := []wingBranch{
		{id: "AHU-1", flow: 80, size: "3", length: 60, k: 8, terminal: 5, valve: "BV3", setting: 8, controlCv: 90,
			header: 30, hsize: "4", note: "air handler, operating suite, cooling coil"},
		{id: "R-N", flow: 22, size: "1-1/2", length: 40, k: 5, valve: "BV15", setting: 5,
			header: 40, hsize: "4", note: "north riser, patient rooms (controller in the return, partner valve on the supply)"},
		fc("FC-N1", "R-N", 4, 30, 7, "1-1/2", "fan coil, room N1"),
		fc("FC-N2", "R-N", 4.5, 32, 7, "1-1/4", "fan coil, room N2"),
		fc("FC-N3", "R-N", 5, 34, 8, "1-1/4", "fan coil, room N3"),
		fc("FC-N4", "R-N", 4, 36, 6, "1", "fan coil, room N4"),
		fc("FC-N5", "R-N", 4.5, 40, 6, "1", "fan coil, room N5 (top floor)"),
		{id: "AHU-2", flow: 60, size: "2-1/2", length: 70, k: 8, terminal: 5, valve: "BV3", setting: 8, controlCv: 70,
			header: 40, hsize: "3", note: "air handler, imaging suite, cooling coil"},
		{id: "R-S", flow: 18, size: "1-1/2", length: 50, k: 5, valve: "BV15", setting: 5,
			header: 50, hsize: "2", note: "south riser, ward bays (far end)"},
		fc("FC-S1", "R-S", 4.5, 30, 7, "1-1/4", "fan coil, bay S1"),
		fc("FC-S2", "R-S", 4.5, 32, 7, "1-1/4", "fan coil, bay S2"),
		fc("FC-S3", "R-S", 4.5, 34, 6, "1", "fan coil, bay S3"),
		fc("FC-S4", "R-S", 4.5, 40, 6, "1", "fan coil, bay S4 (top floor)"),
	}
	for i := range rows {
		s.Branches = append(s.Branches, rows[i].branch())
	}
	rn := 1
	s.Branches[rn].Controller = site.Controller{SetPoint: psi(16), Kvs: kvOfCv(16), Min: psi(5), Max: psi(25)}

	n := len(rows)
	t := &Truth{ActualSetting: make([]float64, n), Stuck: make([]float64, n), Faults: make([]string, n)}
	t.Params.Resistance, t.Params.KvScale, t.Params.SetPoint = make([]float64, n), make([]float64, n), make([]float64, n)
	t.Params.Header, t.Params.PumpHead = 1, 1
	for i := range rows {
		t.Params.Resistance[i], t.Params.KvScale[i], t.Params.SetPoint[i] = 1, 1, 1
		t.ActualSetting[i], t.Stuck[i] = nan, nan
	}
	for i, r := range rows {
		switch r.id {
		case "AHU-2":
			t.Params.Resistance[i], t.Faults[i] = 2.5, Fouled
		case "FC-S4":
			t.Params.Resistance[i], t.Faults[i] = 3, Fouled
		case "R-N":
			t.Params.SetPoint[i], t.Faults[i] = 0.75, OffSetPoint
		}
	}

	flow := func(id, at string) take { return take{Where: id, What: site.Flow, Instrument: "clamp-on", Time: at} }
	diff := func(id string, q site.Quantity, at string) take {
		return take{Where: id, What: q, Instrument: "manometer", Time: at}
	}
	pumps := func(at string) []take {
		return []take{diff(site.AtPump, site.PumpDiff, at), {Where: site.AtPump, What: site.TotalFlow, Instrument: "clamp-on", Time: at}}
	}
	asFound := append(pumps("07:45"),
		flow("AHU-1", "08:00"), diff("AHU-1", site.ValveDiff, "08:03"),
		flow("R-N", "08:15"), diff("R-N", site.ControlledDiff, "08:18"), diff("R-N", site.ValveDiff, "08:19"),
		flow("FC-N1", "08:30"), flow("FC-N3", "08:40"), flow("FC-N5", "08:50"), diff("FC-N5", site.BranchDiff, "08:52"),
		flow("AHU-2", "09:05"), diff("AHU-2", site.BranchDiff, "09:07"), diff("AHU-2", site.ValveDiff, "09:08"),
		flow("R-S", "09:20"), diff("R-S", site.ValveDiff, "09:22"),
		flow("FC-S1", "09:30"), flow("FC-S2", "09:36"), flow("FC-S3", "09:42"),
		flow("FC-S4", "09:50"), diff("FC-S4", site.BranchDiff, "09:52"), diff("FC-S4", site.ValveDiff, "09:53"),
	)
	duty := append(pumps("10:40"),
		flow("AHU-1", "10:45"), diff("AHU-1", site.ValveDiff, "10:47"),
		diff("R-N", site.ControlledDiff, "10:55"),
		flow("AHU-2", "11:02"), diff("AHU-2", site.BranchDiff, "11:04"),
		flow("R-S", "11:12"),
		flow("FC-S4", "11:20"), diff("FC-S4", site.ValveDiff, "11:22"),
	)
	duty[0].Note = "assist pump P2 stopped; AHU-1 closed down to 5 turns"
	states := []stateDef{
		{Label: "as-found", Takes: asFound, Running: 2},
		{Label: "duty-only", Takes: duty, Running: 1, Moves: []move{{"AHU-1", 5}}},
	}
	s.States = []site.StateSetting{
		{Label: "as-found", Speed: nan, SetPoint: nan, Running: 2, Note: "duty and assist pumps running"},
		{Label: "duty-only", Speed: nan, SetPoint: nan, Running: 1, Note: "assist pump stopped"},
	}
	m, err := model(s)
	if err != nil {
		return nil, nil, err
	}
	rs, err := survey(ctx, m, t, states, rand.New(rand.NewPCG(2026, 4)), surveyOpts{noise: 1, round: true, us: true})
	if err != nil {
		return nil, nil, err
	}
	s.Readings = rs
	return s, t, nil
}
