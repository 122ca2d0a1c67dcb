package synth

import (
	"context"
	"math"
	"math/rand/v2"

	"flowset/internal/site"
	"flowset/internal/units"
)

// The example sites of surveys/ are written out by hand below: their
// schedules, their hidden truth and the survey the technician took. Their
// names, places and valve models are invented. The readings are simulated
// on the true plant with a fixed seed and shown as instruments show them;
// TestDemoSite keeps the committed sheets equal to what these functions
// give.

// in returns the SI value of x in unit symbol of kind k such that the sheets
// print x as typed.
func in(k units.Kind, symbol string, x float64) float64 {
	if math.IsNaN(x) {
		return x
	}
	u, err := units.Lookup(k, symbol)
	if err != nil {
		return math.NaN() // not reached: the symbols below are in the table
	}
	return siFor(u, x)
}

func lps(x float64) float64 { return in(units.Flow, "l/s", x) }
func kpa(x float64) float64 { return in(units.Pressure, "kPa", x) }
func pct(x float64) float64 { return in(units.Dimensionless, "%", x) }

// lawValve is a handwheel valve of the example sites: its table is not
// typed from any catalogue but drawn from the generator's stated opening
// law (valveTable: eight points, Kv = Kvs·0.03^((1-x)^1.3) at the fraction x
// of the turns, three significant figures), so no table sits close to a
// maker's.
func lawValve(name string, kvs, turns float64) site.ValveModel {
	vm := valveTable(valveSize{name: name, kvs: kvs, turns: turns})
	vm.MinDiff = kpa(3)
	return vm
}

// demoBranch is one row of an example site's schedule, in the sheets' units.
type demoBranch struct {
	id, parent    string
	flow          float64 // l/s
	std, size     string
	length, k     float64 // m, flow and return; fittings
	terminal      float64 // kPa
	valve         string
	setting       float64 // turns or %, as found (recorded)
	control       float64 // Kvs of a control valve held open, 0 for none
	hlen          float64 // header segment, m (supply and return alike; NaN: reverse-return leg below)
	rlen          float64 // return length where it differs from hlen, else NaN
	hstd, hsize   string
	hk            float64
	note          string
	fault         string
	resistance    float64 // true multiplier, 0 = 1
	actualSetting float64 // true setting of a mis-set valve, NaN = as recorded
}

func (d demoBranch) branch() site.Branch {
	nan := math.NaN()
	rl := d.hlen
	if !math.IsNaN(d.rlen) {
		rl = d.rlen
	}
	return site.Branch{ID: d.id, Parent: d.parent, DesignFlow: lps(d.flow), PipeStandard: d.std, PipeSize: d.size, PipeBore: nan,
		PipeLength: d.length, Roughness: nan, FittingsK: d.k, TerminalDrop: kpa(d.terminal), TerminalFlow: nan,
		Valve: d.valve, Setting: d.setting, ControlKvs: d.control, SupplyLength: d.hlen, ReturnLength: rl,
		HeaderStandard: d.hstd, HeaderSize: d.hsize, HeaderBore: nan, HeaderK: d.hk, Note: d.note}
}

// build turns example rows into a site's branches and its truth.
func build(s *site.Site, rows []demoBranch) *Truth {
	n := len(rows)
	t := &Truth{ActualSetting: make([]float64, n), Stuck: make([]float64, n), Faults: make([]string, n)}
	t.Params.Resistance, t.Params.KvScale = make([]float64, n), make([]float64, n)
	t.Params.Header, t.Params.PumpHead = 1, 1
	for i, r := range rows {
		s.Branches = append(s.Branches, r.branch())
		t.Params.Resistance[i], t.Params.KvScale[i] = 1, 1
		if r.resistance != 0 {
			t.Params.Resistance[i] = r.resistance
		}
		t.ActualSetting[i], t.Stuck[i] = r.actualSetting, math.NaN()
		t.Faults[i] = r.fault
	}
	return t
}

// Demo returns the demo site of surveys/demo and its hidden truth:
// Quillmere Academy, an invented secondary school, and the low-temperature
// hot-water circuit of its teaching block. Fourteen branches on
// direct-return headers (two air-handler coils, a calorifier primary,
// radiator and underfloor circuits, a fan-coil riser with four fan coils),
// surveyed as found, out of balance, and again after the technician closed
// three near valves and opened a far one.
//
// The hidden truth: AHU-2's coil circuit is fouled, its resistance three
// times design (a blocked strainer); RAD-2F's valve is mis-set, recorded at
// 3.0 turns but really at 1.2 (its indicator has slipped), so the
// after-change "4.0" puts it at 2.2.
func Demo(ctx context.Context) (*site.Site, *Truth, error) {
	nan := math.NaN()
	s := &site.Site{
		Name: "Quillmere Academy - teaching block LTHW", Fluid: "water", Temperature: in(units.Temperature, "degC", 70),
		Header:   site.DirectReturn,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan, Sensor: site.AtPump},
		Hours:    2500, EnergyPrice: 0.25, Currency: "EUR", PumpEfficiency: pct(60), MotorEfficiency: pct(88),
		ToleranceLow: pct(-10), ToleranceHigh: pct(10),
		Valves: []site.ValveModel{
			lawValve("V15", 2.5, 4), lawValve("V20", 5.6, 4), lawValve("V25", 9, 4), lawValve("V40", 24, 8),
		},
		Pump: []site.PumpPoint{
			{Flow: lps(0), Head: 21.5}, {Flow: lps(3), Head: 20.8}, {Flow: lps(6), Head: 19.0}, {Flow: lps(8), Head: 17.2}, {Flow: lps(10), Head: 14.8},
		},
	}
	const st, cu = "en10255-m", "en1057"
	rows := []demoBranch{
		{id: "AHU-1", flow: 1.6, std: st, size: "DN40", length: 24, k: 8, terminal: 20, valve: "V40", setting: 8, control: 20,
			hlen: 12, rlen: nan, hstd: st, hsize: "DN80", hk: 1.5, note: "sports hall air handler, heating coil"},
		{id: "CAL-1", flow: 1.2, std: st, size: "DN40", length: 18, k: 6, terminal: 20, valve: "V40", setting: 6.5, control: 20,
			hlen: 6, rlen: nan, hstd: st, hsize: "DN65", hk: 1, note: "domestic hot-water calorifier, primary coil"},
		{id: "RAD-GN", flow: 0.55, std: st, size: "DN25", length: 46, k: 10, terminal: 12, valve: "V25", setting: 4,
			hlen: 8, rlen: nan, hstd: st, hsize: "DN65", hk: 1, note: "radiators, ground floor north"},
		{id: "AHU-2", flow: 0.75, std: st, size: "DN32", length: 30, k: 8, terminal: 28, valve: "V25", setting: 4, control: 8,
			hlen: 7, rlen: nan, hstd: st, hsize: "DN50", hk: 1, note: "classroom wing air handler, heating coil",
			fault: Fouled, resistance: 3},
		{id: "FCU-R", flow: 0.63, std: st, size: "DN32", length: 16, k: 5, valve: "V25", setting: 4,
			hlen: 9, rlen: nan, hstd: st, hsize: "DN50", hk: 1, note: "fan-coil riser, science wing"},
		{id: "FCU-R.1", parent: "FCU-R", flow: 0.15, std: cu, size: "22x0.9", length: 12, k: 6, terminal: 20, valve: "V15", setting: 4,
			hlen: 3.6, rlen: nan, hstd: st, hsize: "DN32", hk: 1, note: "fan coil, lab 1"},
		{id: "FCU-R.2", parent: "FCU-R", flow: 0.18, std: cu, size: "22x0.9", length: 12, k: 6, terminal: 22, valve: "V15", setting: 4,
			hlen: 3.6, rlen: nan, hstd: st, hsize: "DN25", hk: 1, note: "fan coil, lab 2"},
		{id: "FCU-R.3", parent: "FCU-R", flow: 0.14, std: cu, size: "22x0.9", length: 14, k: 6, terminal: 20, valve: "V15", setting: 3.5,
			hlen: 3.6, rlen: nan, hstd: st, hsize: "DN20", hk: 1, note: "fan coil, prep room"},
		{id: "FCU-R.4", parent: "FCU-R", flow: 0.16, std: cu, size: "22x0.9", length: 16, k: 6, terminal: 20, valve: "V15", setting: 4,
			hlen: 3.6, rlen: nan, hstd: st, hsize: "DN20", hk: 1, note: "fan coil, lab 3"},
		{id: "RAD-1S", flow: 0.45, std: st, size: "DN25", length: 52, k: 12, terminal: 12, valve: "V20", setting: 4,
			hlen: 8, rlen: nan, hstd: st, hsize: "DN40", hk: 1, note: "radiators, first floor south"},
		{id: "RAD-2F", flow: 0.4, std: st, size: "DN25", length: 58, k: 12, terminal: 12, valve: "V20", setting: 3,
			hlen: 6, rlen: nan, hstd: st, hsize: "DN40", hk: 1, note: "radiators, second floor",
			fault: MisSet, actualSetting: 1.2},
		{id: "UFH-1", flow: 0.3, std: st, size: "DN20", length: 20, k: 6, terminal: 25, valve: "V20", setting: 3.5,
			hlen: 10, rlen: nan, hstd: st, hsize: "DN32", hk: 1, note: "underfloor heating manifold, entrance hall"},
		{id: "RAD-SH", flow: 0.65, std: st, size: "DN32", length: 40, k: 8, terminal: 15, valve: "V25", setting: 4,
			hlen: 14, rlen: nan, hstd: st, hsize: "DN32", hk: 1, note: "radiant panels, changing rooms"},
		{id: "RAD-LIB", flow: 0.25, std: st, size: "DN20", length: 64, k: 12, terminal: 15, valve: "V20", setting: 2,
			hlen: 15, rlen: nan, hstd: st, hsize: "DN20", hk: 1, note: "radiators, library (far end)"},
	}
	for i := range rows {
		if rows[i].actualSetting == 0 {
			rows[i].actualSetting = nan
		}
	}
	t := build(s, rows)

	type tk = take
	flow := func(id, by, at string) tk { return tk{Where: id, What: site.Flow, Instrument: by, Time: at} }
	vdiff := func(id, at string) tk {
		return tk{Where: id, What: site.ValveDiff, Instrument: "manometer", Time: at}
	}
	bdiff := func(id, at string) tk {
		return tk{Where: id, What: site.BranchDiff, Instrument: "manometer", Time: at}
	}
	pump := func(at string) []tk {
		return []tk{{Where: site.AtPump, What: site.PumpDiff, Instrument: "manometer", Time: at},
			{Where: site.AtPump, What: site.TotalFlow, Instrument: "clamp-on", Time: at}}
	}
	asFound := append(pump("09:05"),
		flow("AHU-1", "clamp-on", "09:15"), vdiff("AHU-1", "09:18"),
		flow("CAL-1", "valve-meter", "09:24"),
		flow("RAD-GN", "valve-meter", "09:31"),
		flow("AHU-2", "clamp-on", "09:38"), bdiff("AHU-2", "09:41"), vdiff("AHU-2", "09:43"),
		flow("FCU-R", "valve-meter", "09:50"),
		tk{Where: "FCU-R.1", What: site.Flow, Instrument: "clamp-on", Time: "09:56", Note: "short straight run before the meter"},
		flow("FCU-R.2", "valve-meter", "10:01"), flow("FCU-R.4", "valve-meter", "10:09"),
		flow("RAD-1S", "valve-meter", "10:16"),
		flow("RAD-2F", "valve-meter", "10:22"),
		tk{Where: "RAD-2F", What: site.Flow, Instrument: "clamp-on", Time: "10:26", Note: "meter reading looked high, checked with the clamp-on"},
		vdiff("RAD-2F", "10:27"),
		flow("UFH-1", "clamp-on", "10:34"),
		flow("RAD-SH", "valve-meter", "10:41"),
		flow("RAD-LIB", "valve-meter", "10:48"),
	)
	after := append(pump("11:40"),
		flow("AHU-1", "clamp-on", "11:46"), vdiff("AHU-1", "11:48"),
		flow("CAL-1", "valve-meter", "11:53"),
		flow("RAD-GN", "valve-meter", "11:58"),
		flow("AHU-2", "clamp-on", "12:04"), bdiff("AHU-2", "12:06"),
		flow("RAD-2F", "valve-meter", "12:14"), flow("RAD-2F", "clamp-on", "12:17"), vdiff("RAD-2F", "12:18"),
		flow("RAD-SH", "valve-meter", "12:25"),
		flow("RAD-LIB", "valve-meter", "12:31"),
	)
	after[0].Note = "near valves closed down, RAD-2F opened fully"
	states := []stateDef{
		{Label: "as-found", Takes: asFound},
		{Label: "after-change", Takes: after, Moves: []move{{"AHU-1", 5}, {"CAL-1", 4.5}, {"RAD-GN", 2.5}, {"RAD-2F", 4}}},
	}
	m, err := model(s)
	if err != nil {
		return nil, nil, err
	}
	rs, err := survey(ctx, m, t, states, rand.New(rand.NewPCG(2026, 1)), surveyOpts{noise: 1, round: true})
	if err != nil {
		return nil, nil, err
	}
	s.Readings = rs
	return s, t, nil
}

// Plantroom returns the second example site, surveys/plantroom, and its
// hidden truth: the chilled-glycol circuit of an invented moulding shop,
// Brindlecote Works. Six branches on reverse-return headers, 30 %
// propylene glycol at 7 degC, a pump holding a constant 85 kPa at its
// flanges, one survey state. The hidden truth: the oil cooler of moulding
// machine 3 (IMM-3) is fouled, its resistance twice design.
func Plantroom(ctx context.Context) (*site.Site, *Truth, error) {
	nan := math.NaN()
	s := &site.Site{
		Name: "Brindlecote Works - moulding shop chilled glycol", Fluid: "propylene-glycol", GlycolPercent: 30,
		Temperature: in(units.Temperature, "degC", 7), Header: site.ReverseReturn,
		Boundary: site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: kpa(85), Sensor: site.AtPump},
		Hours:    6000, EnergyPrice: 0.18, Currency: "EUR", PumpEfficiency: pct(70), MotorEfficiency: pct(92),
		ToleranceLow: pct(-10), ToleranceHigh: pct(15),
		Valves: []site.ValveModel{
			lawValve("W25", 14, 4), lawValve("W50", 36, 8),
			{Name: "EQ32", Unit: "%", Step: 1, MinDiff: kpa(3), Characteristic: "equal-percentage", Kvs: 16, Rangeability: 50},
		},
	}
	const st = "en10255-m"
	rows := []demoBranch{
		{id: "AHU-P", flow: 2.2, std: st, size: "DN50", length: 30, k: 8, terminal: 35, valve: "W50", setting: 8, control: 40,
			hlen: 15, rlen: 62, hstd: st, hsize: "DN100", hk: 1.5, note: "process air handler, cooling coil"},
		{id: "IMM-1", flow: 1.2, std: st, size: "DN40", length: 22, k: 10, terminal: 40, valve: "W50", setting: 8,
			hlen: 8, rlen: nan, hstd: st, hsize: "DN80", hk: 1, note: "moulding machine 1, oil cooler"},
		{id: "IMM-2", flow: 1.2, std: st, size: "DN40", length: 26, k: 10, terminal: 40, valve: "W50", setting: 4.5,
			hlen: 8, rlen: nan, hstd: st, hsize: "DN80", hk: 1, note: "moulding machine 2, oil cooler"},
		{id: "IMM-3", flow: 0.9, std: st, size: "DN32", length: 30, k: 10, terminal: 38, valve: "W25", setting: 4,
			hlen: 8, rlen: nan, hstd: st, hsize: "DN80", hk: 1, note: "moulding machine 3, oil cooler",
			fault: Fouled, resistance: 2},
		{id: "MTU-1", flow: 0.6, std: st, size: "DN32", length: 34, k: 12, terminal: 30, valve: "EQ32", setting: 85,
			hlen: 10, rlen: nan, hstd: st, hsize: "DN80", hk: 1, note: "mould temperature unit, cooling side"},
		{id: "AC-1", flow: 0.5, std: st, size: "DN25", length: 40, k: 8, terminal: 25, valve: "W25", setting: 2,
			hlen: 13, rlen: nan, hstd: st, hsize: "DN100", hk: 1, note: "air compressor aftercooler (far end)"},
	}
	for i := range rows {
		if rows[i].actualSetting == 0 {
			rows[i].actualSetting = nan
		}
	}
	t := build(s, rows)
	t.Differential = s.Boundary.SetPoint

	takes := []take{
		{Where: site.AtPump, What: site.PumpDiff, Instrument: "transmitter", Time: "14:00", Note: "read from the drive's display of its sensor"},
		{Where: site.AtPump, What: site.TotalFlow, Instrument: "mag-meter", Time: "14:00"},
		{Where: "AHU-P", What: site.Flow, Instrument: "clamp-on", Time: "14:10"},
		{Where: "AHU-P", What: site.ValveDiff, Instrument: "manometer", Time: "14:12"},
		{Where: "IMM-1", What: site.Flow, Instrument: "valve-meter", Time: "14:20"},
		{Where: "IMM-2", What: site.Flow, Instrument: "valve-meter", Time: "14:26"},
		{Where: "IMM-3", What: site.Flow, Instrument: "clamp-on", Time: "14:33"},
		{Where: "IMM-3", What: site.BranchDiff, Instrument: "manometer", Time: "14:36", Note: "across the machine's flow and return isolators"},
		{Where: "MTU-1", What: site.Flow, Instrument: "clamp-on", Time: "14:45"},
		{Where: "AC-1", What: site.Flow, Instrument: "valve-meter", Time: "14:55"},
	}
	m, err := model(s)
	if err != nil {
		return nil, nil, err
	}
	rs, err := survey(ctx, m, t, []stateDef{{Label: "as-found", Takes: takes}}, rand.New(rand.NewPCG(2026, 2)),
		surveyOpts{noise: 1, round: true})
	if err != nil {
		return nil, nil, err
	}
	s.Readings = rs
	return s, t, nil
}
