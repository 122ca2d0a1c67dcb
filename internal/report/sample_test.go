package report

import (
	"fmt"
	"math"
)

// quad is an invented branch law dp = k q^2 sampled at n points up to qmax.
func quad(k, qmax float64, n int) []XY {
	c := make([]XY, n)
	for i := range c {
		q := qmax * float64(i) / float64(n-1)
		c[i] = XY{X: q, Y: k * q * q}
	}
	return c
}

// sampleInput is an invented five-branch heating circuit. Every number is
// made up for the test: it only has to look like a real job.
func sampleInput() Input {
	type br struct {
		id                string
		design, before    float64 // l/s
		ratio, lo, hi     float64
		flags             []string
		now, planned      float64 // turns
		after, aLo, aHi   float64
		nowText, planText string
	}
	rows := []br{
		{"H2-01 classroom wing north", 0.40, 0.52, 1.02, 0.93, 1.12, nil, 4.0, 2.5, 0.41, 0.38, 0.44, "4.0 turns", "2.5 turns"},
		{"H2-02 classroom wing south", 0.35, 0.41, 0.97, 0.88, 1.07, nil, 4.0, 3.0, 0.36, 0.33, 0.39, "4.0 turns", "3.0 turns"},
		{"H2-03 hall", 0.45, 0.29, 2.30, 1.95, 2.71, []string{"high resistance: blocked strainer?"}, 4.0, 4.0, 0.31, 0.27, 0.35, "4.0 turns", "4.0 turns (clean strainer first)"},
		{"H2-04 kitchen", 0.20, 0.22, 1.10, 0.96, 1.26, nil, 2.5, 2.0, 0.20, 0.18, 0.22, "2.5 turns", "2.0 turns"},
		{"H2-05 offices", 0.25, 0.19, 1.05, 0.90, 1.22, nil, 2.0, 3.5, 0.25, 0.23, 0.27, "2.0 turns", "3.5 turns"},
	}
	var bs []Branch
	for i, r := range rows {
		kd := 20 / (r.design * r.design) // 20 kPa at design flow
		kf := kd * r.ratio
		qmax := 1.3 * math.Max(r.design, r.before)
		b := Branch{
			ID: r.id, Design: r.design, Before: r.before, After: r.after, AfterLow: r.aLo, AfterHigh: r.aHi,
			RatioFit: r.ratio, RatioLow: r.lo, RatioHigh: r.hi, Flags: r.flags,
			SettingNow: r.nowText, SettingPlanned: r.planText, NowValue: r.now, PlannedValue: r.planned, ValveUnit: "turns",
			DesignCurve: quad(kd, qmax, 9), FitCurve: quad(kf, qmax, 9),
			FitLow: quad(kd*r.lo, qmax, 9), FitHigh: quad(kd*r.hi, qmax, 9),
		}
		dp := kf * r.before * r.before
		b.Measured = []Point{
			{X: r.before, Y: dp * (1 + 0.03*float64(i%3-1)), XErr: 0.05 * r.before, YErr: 0.8, Label: "survey 1, tappings"},
			{X: 0.8 * r.before, Y: kf * 0.64 * r.before * r.before, XErr: 0.05 * r.before, YErr: 0.8, Label: "survey 2, valve at 3 turns"},
		}
		bs = append(bs, b)
	}
	plan := Table{Title: "Field sheet", Columns: []string{"Step", "Branch", "Valve now", "Set to", "Expect flow, l/s"}}
	for i, b := range bs {
		plan.Rows = append(plan.Rows, []string{fmt.Sprint(i + 1), b.ID, b.SettingNow, b.SettingPlanned, fmt.Sprintf("%.2f", b.After)})
	}
	plan.Notes = []string{"Set the valves in this order, furthest from the pump first."}
	readings := Table{Title: "Readings and residuals", Columns: []string{"Branch", "Reading", "Value", "Model", "Residual"}}
	for _, b := range bs {
		for _, m := range b.Measured {
			readings.Rows = append(readings.Rows, []string{b.ID, m.Label, fmt.Sprintf("%.1f kPa", m.Y), fmt.Sprintf("%.1f kPa", m.Y+0.3), "-0.3 kPa"})
		}
	}
	settings := Table{Title: "Valve settings", Columns: []string{"#", "Branch", "Valve", "Now", "Set to", "Check: valve Δp (kPa)", "Flow (l/s)"},
		WriteIn: []string{"Set", "Read after", "Initials"}}
	for i, b := range bs {
		settings.Rows = append(settings.Rows, []string{fmt.Sprint(i + 1), b.ID, "V-25", b.SettingNow, b.SettingPlanned, fmt.Sprintf("%.1f", 10+2*float64(i)), fmt.Sprintf("%.2f", b.Design)})
	}
	visit := Visit{
		BeforeStart: []string{
			"Put every control valve fully open for the readings and the settings; put them back to automatic before you leave.",
			"Reading readings.csv:7 (flow at H2-02, valve meter): read 0.62 l/s; the rest of the survey implies 0.33 l/s.",
		},
		Fixes: []Fix{{Where: "H2-03 hall", Action: "clean the strainer and check the isolating valves are fully open",
			Saves: "pump differential 45.0 → 38.0 kPa", ReadAfter: "read its flow: about 0.42 l/s once clean, against 0.29 l/s now"}},
		Pump:        PumpStep{From: "45.0 kPa at the pump", To: "38.0 kPa at the pump", Where: "the differential set point of the pump's controller", Warnings: []string{"No pump curve was given: check the pump can give 38.0 kPa at 1.53 l/s."}},
		OrderReason: "Set the valves in this order, furthest from the pump first.",
		Settings:    settings,
		Prove: Table{Title: "Prove it", Columns: []string{"Branch", "Why read it", "Expect (l/s)", "95 % band (l/s)"}, WriteIn: []string{"Read", "Initials"},
			Rows: [][]string{{"H2-03 hall", "index circuit", "0.31", "0.27 to 0.35"}}},
		Handover: []Field{{Label: "Site", Value: "Invented example school, heating circuit H2"}, {Label: "Date of visit"}, {Label: "Signed, technician"}},
	}
	return Input{
		Visit:        visit,
		Site:         "Invented example school, heating circuit H2",
		Fluid:        "water",
		Temperature:  "70 °C flow",
		Generated:    "2026-03-14",
		Measured:     "Branch differentials at the balancing valves' tappings and the pump differential, in two valve states.",
		FlowUnit:     "l/s",
		PressureUnit: "kPa",
		ToleranceLow: -10, ToleranceHigh: 10,
		Summary: Summary{
			InBefore: 1, OutBefore: 4, InAfter: 4, OutAfter: 1,
			Faults:         []string{"H2-03 hall: resistance 2.3 times design (95 % interval 1.95 to 2.71): blocked strainer or partly closed isolating valve."},
			SetpointBefore: "45 kPa constant differential",
			SetpointAfter:  "38 kPa constant differential",
			SpeedRatio:     0.93,
			EnergySaving:   "about 20 % less pump power (affinity laws, estimate)",
			Notes:          []string{"H2-03 stays below tolerance until its strainer is cleaned."},
		},
		Branches: bs,
		Combined: Combined{
			System:      quad(45/(1.63*1.63), 2.2, 12),
			SystemAfter: quad(38/(1.53*1.53), 2.2, 12),
			PumpBefore:  pumpCurve(60, 6.2, 2.2, 12),
			PumpAfter:   pumpCurve(60*0.93*0.93, 6.2, 2.2, 12),
			OpBefore:    XY{X: 1.63, Y: 45},
			OpAfter:     XY{X: 1.53, Y: 38},
		},
		Plan: plan,
		Diagnosis: Table{Title: "Diagnosis", Columns: []string{"Branch", "Finding", "Evidence"}, Rows: [][]string{
			{"H2-03 hall", "high resistance", "fitted resistance 2.3 × design; flow 64 % of design with the valve fully open"},
		}},
		Readings: readings,
	}
}

// pumpCurve is an invented pump law dp = h0 - c q^2.
func pumpCurve(h0, c, qmax float64, n int) []XY {
	p := make([]XY, n)
	for i := range p {
		q := qmax * float64(i) / float64(n-1)
		p[i] = XY{X: q, Y: h0 - c*q*q}
	}
	return p
}

// withTrim adds to in the round after setting, as trim fills it: every
// branch as found, predicted and as left (every third read after setting,
// the others the model alone), one trimmed, one to read first, and the
// pump corrected.
func withTrim(in Input) Input {
	t := &Trim{State: "after setting", File: "trim.csv",
		Summary: []string{
			"As left (state \"after setting\"): 2 of 5 branches proven in tolerance, 0 proven out, 3 the readings cannot tell; the model puts 4 of 5 inside the tolerance.",
			"Pump differential set point: from 38.0 kPa to 38.6 kPa.",
			"Trim 1 valve(s) (below); the model then puts 5 of 5 inside the tolerance.",
		},
		Pump:  PumpStep{From: "38.0 kPa", To: "38.6 kPa", Where: "the differential set point of the pump's controller"},
		Trims: Table{Columns: []string{"#", "Branch", "As left (% of target)", "Setting as left", "Trim to", "Then (% of target)", "Why"}, WriteIn: []string{"Done", "Initials"}},
	}
	for i, b := range in.Branches {
		found := pct(b.Before, b.Design)
		pred := pct(b.After, b.Design)
		left := pred * (0.97 + 0.02*float64(i%4))
		tb := TrimBranch{ID: b.ID, Found: found, Predicted: pred, Left: left, After: 100 + float64(i%3-1), Read: i%3 == 0}
		w := 0.09
		if tb.Read {
			w = 0.03
		}
		tb.LeftLow, tb.LeftHigh = left*(1-w), left*(1+w)
		switch {
		case tb.LeftLow >= 90 && tb.LeftHigh <= 110:
			tb.Verdict, tb.Proven = "proven in tolerance", true
		case tb.LeftHigh < 90 || tb.LeftLow > 110:
			tb.Verdict = "proven out of tolerance"
		default:
			tb.Verdict = "cannot tell"
		}
		if len(in.Branches) <= 10 || i%50 == 7 {
			switch i % 5 {
			case 3:
				tb.Trim = "2.2 turns"
			case 4:
				tb.Note = "not read after setting: read it before trimming"
			}
		}
		if tb.Trim != "" || tb.Note != "" {
			why := tb.Note
			if why == "" {
				why = fmt.Sprintf("read %.1f %% of target after setting", left)
			}
			t.Trims.Rows = append(t.Trims.Rows, []string{fmt.Sprint(len(t.Trims.Rows) + 1), b.ID, fmt.Sprintf("%.1f", left), b.SettingPlanned, dash(tb.Trim), fmt.Sprintf("%.1f", tb.After), why})
		}
		t.Branches = append(t.Branches, tb)
	}
	in.Trim = t
	in.Summary.InAfter, in.Summary.OutAfter = 4, 1
	in.Summary.SetpointAfter = "38.0 kPa constant differential (as left)"
	return in
}

func trimInput() Input { return withTrim(sampleInput()) }
