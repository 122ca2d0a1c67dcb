package synth

import (
	"context"
	"math"
	"math/rand/v2"

	"flowset/internal/site"
	"flowset/internal/units"
)

// Mislimited names the fault of a pressure-independent valve whose setting
// does not give its table's flow (Truth.Params.KvScale holds the ratio).
const Mislimited = "mis-limited"

// heldValve is the pressure-independent valve model of Ward: not typed from
// any catalogue but drawn from a stated law (0.04 l/s per step, steps 1 to
// 10, holding from 25 kPa; the Kv below that left for the model to derive).
func heldValve() site.ValveModel {
	vm := site.ValveModel{Name: "PF20", Unit: "steps", Step: 0.5, MinDiff: kpa(3), HoldDiff: kpa(25),
		Kvs: math.NaN(), Rangeability: math.NaN()}
	for s := 1.0; s <= 10; s++ {
		vm.Settings = append(vm.Settings, s)
		vm.MaxFlow = append(vm.MaxFlow, lps(0.04*s))
		vm.Kv = append(vm.Kv, math.NaN())
	}
	return vm
}

// Ward returns a constructed site on pressure-independent valves and its
// hidden truth: the chilled-water circuit of an invented clinic's consulting
// wing, Harrowfield Clinic. Eight fan-coil branches on pressure-independent
// valves and one air-handler coil on a handwheel valve, direct-return
// headers, a pump whose drive runs at 70 % of rated speed, two survey states (as found, and after the
// technician reset three valves).
//
// The hidden truth: FCU-8's strainer is blocked (its fixed parts four times
// design), so at the drive's 70 % speed its valve is starved below its hold differential; FCU-3's
// valve passes 0.8 of its table's flow at any setting (its limiter is
// mis-set in the factory or fouled: the flow scale of the fit).
func Ward(ctx context.Context) (*site.Site, *Truth, error) {
	nan := math.NaN()
	s := &site.Site{
		Name: "Harrowfield Clinic - consulting wing chilled water", Fluid: "water", Temperature: in(units.Temperature, "degC", 8),
		Header:   site.DirectReturn,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 0.7, MaxSpeed: 1, SetPoint: nan, Sensor: site.AtPump},
		Hours:    3000, EnergyPrice: 0.22, Currency: "EUR", PumpEfficiency: pct(55), MotorEfficiency: pct(85),
		ToleranceLow: pct(-10), ToleranceHigh: pct(10),
		Valves: []site.ValveModel{heldValve(), lawValve("V32", 12, 5)},
		Pump: []site.PumpPoint{
			{Flow: lps(0), Head: 18}, {Flow: lps(1), Head: 17.5}, {Flow: lps(2), Head: 16}, {Flow: lps(3), Head: 13.2},
		},
	}
	const st, cu = "en10255-m", "en1057"
	fcu := func(id string, q, term, length, setting, hlen float64, hsize, note string) demoBranch {
		return demoBranch{id: id, flow: q, std: cu, size: "22x0.9", length: length, k: 8, terminal: term, valve: "PF20",
			setting: setting, hlen: hlen, rlen: nan, hstd: st, hsize: hsize, hk: 1, note: note, actualSetting: nan}
	}
	rows := []demoBranch{
		{id: "AHU-W", flow: 0.9, std: st, size: "DN32", length: 20, k: 8, terminal: 30, valve: "V32", setting: 5, control: 12,
			hlen: 8, rlen: nan, hstd: st, hsize: "DN65", hk: 1.5, note: "fresh-air handler, cooling coil", actualSetting: nan},
		fcu("FCU-1", 0.20, 18, 24, 6, 6, "DN50", "fan coil, consulting room 1"),
		fcu("FCU-2", 0.16, 16, 28, 5, 5, "DN50", "fan coil, consulting room 2"),
		fcu("FCU-3", 0.24, 20, 30, 6, 5, "DN50", "fan coil, treatment room"),
		fcu("FCU-4", 0.12, 15, 32, 4, 6, "DN40", "fan coil, office"),
		fcu("FCU-5", 0.20, 18, 36, 5, 5, "DN40", "fan coil, consulting room 3"),
		fcu("FCU-6", 0.16, 16, 40, 4, 6, "DN32", "fan coil, consulting room 4"),
		fcu("FCU-7", 0.12, 15, 44, 3, 5, "DN32", "fan coil, waiting area"),
		fcu("FCU-8", 0.20, 18, 50, 5, 8, "DN25", "fan coil, consulting room 5 (far end)"),
	}
	rows[3].fault = Mislimited
	rows[8].fault, rows[8].resistance = Fouled, 3
	t := build(s, rows)
	t.Params.KvScale[3] = 0.8

	flow := func(id, at string) take { return take{Where: id, What: site.Flow, Instrument: "clamp-on", Time: at} }
	vdiff := func(id, at string) take {
		return take{Where: id, What: site.ValveDiff, Instrument: "manometer", Time: at}
	}
	bdiff := func(id, at string) take {
		return take{Where: id, What: site.BranchDiff, Instrument: "manometer", Time: at}
	}
	pump := func(at string) []take {
		return []take{{Where: site.AtPump, What: site.PumpDiff, Instrument: "manometer", Time: at},
			{Where: site.AtPump, What: site.TotalFlow, Instrument: "clamp-on", Time: at}}
	}
	asFound := append(pump("08:30"),
		flow("AHU-W", "08:40"), vdiff("AHU-W", "08:42"),
		flow("FCU-1", "08:50"), flow("FCU-2", "08:55"),
		flow("FCU-3", "09:00"), vdiff("FCU-3", "09:02"),
		flow("FCU-4", "09:08"), flow("FCU-5", "09:12"), bdiff("FCU-5", "09:14"),
		flow("FCU-6", "09:18"), flow("FCU-7", "09:22"),
		flow("FCU-8", "09:28"), bdiff("FCU-8", "09:30"), vdiff("FCU-8", "09:31"),
	)
	after := append(pump("10:15"),
		flow("FCU-1", "10:20"), flow("FCU-3", "10:25"), vdiff("FCU-3", "10:26"),
		flow("FCU-7", "10:32"), flow("FCU-8", "10:38"), vdiff("FCU-8", "10:39"),
	)
	after[0].Note = "FCU-1 and FCU-3 turned down, FCU-7 up"
	states := []stateDef{
		{Label: "as-found", Takes: asFound},
		{Label: "after-change", Takes: after, Moves: []move{{"FCU-1", 5}, {"FCU-3", 5}, {"FCU-7", 4}}},
	}
	m, err := model(s)
	if err != nil {
		return nil, nil, err
	}
	rs, err := survey(ctx, m, t, states, rand.New(rand.NewPCG(2026, 3)), surveyOpts{noise: 1, round: true})
	if err != nil {
		return nil, nil, err
	}
	s.Readings = rs
	return s, t, nil
}
