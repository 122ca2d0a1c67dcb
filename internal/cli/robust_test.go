package cli

import (
	"archive/zip"
	"bytes"
	"context"
	"encoding/json"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"flowset/internal/plant"
	"flowset/internal/site"
)

// badNumber matches the ways Go and JavaScript spell a value that is not a
// finite number. "Info" and "Infinite" in prose do not match.
var badNumber = regexp.MustCompile(`\bNaN\b|[+-]?\bInf\b|\bInfinity\b`)

// scanText returns the places in text where a non-finite number is spelt.
func scanText(name, text string) []string {
	var out []string
	for _, loc := range badNumber.FindAllStringIndex(text, -1) {
		lo, hi := max(0, loc[0]-60), min(len(text), loc[1]+60)
		out = append(out, name+": "+strings.ReplaceAll(text[lo:hi], "\n", `\n`))
	}
	return out
}

// reportData is report.html without the inlined charting library, whose
// own code spells NaN and Infinity legitimately.
func reportData(html string) string {
	i := strings.Index(html, "<script>")
	if i < 0 {
		return html
	}
	j := strings.Index(html[i:], "</script>")
	if j < 0 {
		return html
	}
	return html[:i] + html[i+j:]
}

// scanOutputs reads every file under dir (the parts of an .xlsx too) and
// returns each place a non-finite number appears.
func scanOutputs(t *testing.T, dir string) []string {
	t.Helper()
	var out []string
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		name := filepath.Base(p)
		switch filepath.Ext(p) {
		case ".xlsx":
			zr, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
			if err != nil {
				return err
			}
			for _, f := range zr.File {
				rc, err := f.Open()
				if err != nil {
					return err
				}
				x, err := io.ReadAll(rc)
				rc.Close()
				if err != nil {
					return err
				}
				out = append(out, scanText(name+"/"+f.Name, string(x))...)
			}
		case ".html":
			out = append(out, scanText(name, reportData(string(b)))...)
		default:
			out = append(out, scanText(name, string(b))...)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// planNulls returns the fields of plan.json that must hold a number but are
// null (the writer's spelling of NaN): every branch's target and predicted
// flow, a valve's new setting, the planned source differential and flow.
func planNulls(t *testing.T, dir string) []string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, "plan.json"))
	if err != nil {
		t.Fatal(err)
	}
	var p struct {
		Required *float64 `json:"required_differential_pa"`
		Total    *float64 `json:"total_flow_m3_s"`
		Pump     struct {
			AfterFlow *float64 `json:"after_flow_m3_s"`
			AfterDiff *float64 `json:"after_differential_pa"`
		} `json:"pump"`
		Branches []struct {
			ID        string   `json:"branch"`
			Valve     string   `json:"valve"`
			New       *float64 `json:"new_setting"`
			Target    *float64 `json:"target_m3_s"`
			Predicted *float64 `json:"predicted_m3_s"`
		} `json:"branches"`
	}
	if err := json.Unmarshal(b, &p); err != nil {
		t.Fatalf("plan.json: %v", err)
	}
	var out []string
	need := func(what string, v *float64) {
		if v == nil {
			out = append(out, "plan.json: "+what+" is null")
		}
	}
	need("required_differential_pa", p.Required)
	need("total_flow_m3_s", p.Total)
	need("pump.after_flow_m3_s", p.Pump.AfterFlow)
	need("pump.after_differential_pa", p.Pump.AfterDiff)
	for _, br := range p.Branches {
		need(br.ID+" target_m3_s", br.Target)
		need(br.ID+" predicted_m3_s", br.Predicted)
		if br.Valve != "" {
			need(br.ID+" new_setting", br.New)
		}
	}
	return out
}

// writeSite writes s as CSV sheets into a new folder and returns it.
func writeSite(tb testing.TB, s *site.Site) string {
	tb.Helper()
	dir := filepath.Join(tb.TempDir(), "site")
	if err := os.Mkdir(dir, 0o755); err != nil {
		tb.Fatal(err)
	}
	err := site.WriteDir(s, func(name string) (io.WriteCloser, error) { return os.Create(filepath.Join(dir, name)) })
	if err != nil {
		tb.Fatal(err)
	}
	return dir
}

// edgeSite is a four-branch direct-return heating circuit on a pump with a
// one-state survey: flows on three branches, a valve differential and the
// pump differential. Invented for these tests; the readings are roughly what
// the design model gives.
func edgeSite() *site.Site {
	nan := math.NaN()
	br := func(id string, q, term, setting float64) site.Branch {
		return site.Branch{ID: id, DesignFlow: q, PipeStandard: "en10255-m", PipeSize: "DN25", PipeBore: nan, PipeLength: 20,
			Roughness: nan, FittingsK: 5, TerminalDrop: term, TerminalFlow: nan, Valve: "V25", Setting: setting,
			SupplyLength: 10, ReturnLength: 10, HeaderStandard: "en10255-m", HeaderSize: "DN50", HeaderBore: nan}
	}
	rd := func(where string, what site.Quantity, v float64, inst string) site.Reading {
		in := instrument(inst)
		return site.Reading{State: "as-found", Where: where, What: what, Value: v, Setting: nan, Instrument: inst, Sigma: in.DefaultSigma(what, v)}
	}
	return &site.Site{
		Name: "edge", Fluid: "water", Temperature: 273.15 + 60, Header: site.DirectReturn,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan, Sensor: site.AtPump},
		Hours:    2000, EnergyPrice: 0.2, Currency: "EUR", PumpEfficiency: 0.6, MotorEfficiency: 0.85,
		ToleranceLow: -0.1, ToleranceHigh: 0.1,
		Branches: []site.Branch{br("a", 0.5e-3, 20e3, 2), br("b", 0.6e-3, 25e3, 3), br("c", 0.4e-3, 15e3, 2.5), br("d", 0.3e-3, 10e3, 1)},
		Valves:   []site.ValveModel{{Name: "V25", Unit: "turns", Settings: []float64{0.5, 1, 2, 3, 4}, Kv: []float64{0.3, 1.2, 2.6, 4.2, 5.6}, Step: 0.1, Kvs: nan, Rangeability: nan, MinDiff: 3000}},
		Pump:     []site.PumpPoint{{Flow: 0, Head: 8}, {Flow: 1e-3, Head: 7.5}, {Flow: 2e-3, Head: 6}, {Flow: 3e-3, Head: 3.5}},
		Readings: []site.Reading{
			rd("a", site.Flow, 0.55e-3, "clamp-on"), rd("b", site.Flow, 0.6e-3, "clamp-on"), rd("c", site.Flow, 0.42e-3, "clamp-on"),
			rd("d", site.ValveDiff, 12e3, "manometer"), rd(site.AtPump, site.PumpDiff, 70e3, "manometer"),
		},
	}
}

func instrument(name string) site.Instrument {
	for _, in := range site.Instruments() {
		if in.Name == name {
			return in
		}
	}
	panic("no instrument " + name)
}

// simulate replaces every reading's value by the design model's prediction
// (and its default uncertainty), so a case starts from a survey that agrees
// with its site.
func simulate(t *testing.T, s *site.Site) {
	t.Helper()
	m, err := plant.New(s)
	if err != nil {
		t.Fatalf("simulate: %v", err)
	}
	for k, st := range m.States {
		sol, err := m.Solve(context.Background(), m.Design(), st)
		if err != nil {
			t.Fatalf("simulate state %d: %v", k, err)
		}
		for _, ri := range st.Readings {
			r := &s.Readings[ri]
			v, err := sol.Predict(r)
			if err != nil {
				t.Fatalf("simulate: %v", err)
			}
			in := instrument(r.Instrument)
			r.Value, r.Sigma = v, in.DefaultSigma(r.What, v)
		}
	}
}

// edgeCase is one site at the edge of what the job can do: the run must end
// with the wanted exit code and say the wanted things (on stdout when it
// succeeds, on stderr when it refuses), and never write a non-finite number.
type edgeCase struct {
	name string
	edit func(t *testing.T, s *site.Site)
	code int
	args []string // more flags for run
	want []string // each must appear on stdout (exit 0) or stderr (exit 1)
	not  []string // none may appear on stdout
	// files maps an output file to text it must hold.
	files map[string][]string
}

// shutAll puts every valve at the bottom of its table.
func shutAll(s *site.Site) {
	for i := range s.Branches {
		s.Branches[i].Setting = s.Valves[0].Settings[0]
	}
}

var edgeCases = []edgeCase{
	{name: "base", edit: func(t *testing.T, s *site.Site) { simulate(t, s) },
		want: []string{"Branches in tolerance (-10 % to +10 % of target): 1 of 4 as found, 4 of 4 after the plan"}},

	// Zero flows.
	{name: "zero design flow", code: ExitData, edit: func(t *testing.T, s *site.Site) { s.Branches[2].DesignFlow = 0 },
		want: []string{`branches.csv:4:3: field "design flow": value "0": must be positive`}},
	{name: "zero target flow", code: ExitData, edit: func(t *testing.T, s *site.Site) {
		simulate(t, s)
		s.Targets = map[string]float64{"c": 0}
	}, want: []string{`targets.csv:2:2: field "target flow": value "0": must be positive`}},
	{name: "zero flow read on an open branch", edit: func(t *testing.T, s *site.Site) {
		simulate(t, s)
		s.Readings[2].Value, s.Readings[2].Sigma = 0, 0.01e-3
	}, want: []string{"suspect-reading", "readings.csv:4 (suspect-reading, warning): reading far from what the rest of the survey implies", "read 0.000 l/s; the rest of the survey implies 0.493 l/s. It was left out of the calculation."}},

	// Closed valves.
	{name: "valve found shut, kv 0 in its table", code: ExitData, edit: func(t *testing.T, s *site.Site) {
		s.Valves[0].Kv[0] = 0
		s.Branches[2].Setting = s.Valves[0].Settings[0]
	}, want: []string{`valves.csv:2:6: field "kv": value "0": kv 0 is a shut valve, which cannot be modelled`}},
	{name: "valve found at the bottom of its table", edit: func(t *testing.T, s *site.Site) {
		s.Branches[2].Setting = s.Valves[0].Settings[0]
		simulate(t, s)
	}, want: []string{"3 c V25 0.50 turns 1.90 turns", "4 of 4"}},
	{name: "every valve at the bottom of its table", edit: func(t *testing.T, s *site.Site) {
		shutAll(s)
		simulate(t, s)
	}, want: []string{"4 of 4"}},
	{name: "every valve nearly shut", edit: func(t *testing.T, s *site.Site) {
		s.Valves[0].Kv[0] = 1e-4
		shutAll(s)
		simulate(t, s)
	}, want: []string{"4 of 4"}},
	{name: "every valve nearly shut, no readings", edit: func(t *testing.T, s *site.Site) {
		s.Valves[0].Kv[0] = 1e-4
		shutAll(s)
		s.Readings = nil
	}, want: []string{"No readings: nothing to fit", "4 of 4"}},

	// Boundaries too weak for the circuit.
	{name: "tiny pump", code: ExitShort, edit: func(t *testing.T, s *site.Site) {
		for i := range s.Pump {
			s.Pump[i].Head *= 1e-3
		}
		simulate(t, s)
	}, want: []string{"cannot-reach-design", "THIS PLAN CANNOT MEET ITS TARGETS", "Short after the plan: every branch, at 3 % to 6 % of its target", "at full speed (100.0 %) it gives 0.1 kPa there, 55.8 kPa short", "the short branches need more at the pump for their targets (a 41.4 kPa, b 55.9 kPa"}},
	{name: "tiny pump, readings of the design pump", edit: func(t *testing.T, s *site.Site) {
		simulate(t, s)
		for i := range s.Pump {
			s.Pump[i].Head *= 1e-3
		}
	}, want: []string{"suspect-reading"}},
	{name: "pump with no head at all", code: ExitData, edit: func(t *testing.T, s *site.Site) {
		simulate(t, s)
		for i := range s.Pump {
			s.Pump[i].Head = 0
		}
	}, want: []string{`pump.csv:5:2: field "head": shut-off head 0 m of the fit is not positive`}},
	{name: "measured differential of 0 Pa", code: ExitData, edit: func(t *testing.T, s *site.Site) {
		s.Boundary = site.Boundary{Kind: site.MeasuredDiff, Speed: 1, MaxSpeed: 1, SetPoint: math.NaN()}
		s.Pump = nil
		s.Readings[4] = site.Reading{State: "as-found", Where: site.AtHeader, What: site.HeaderDiff, Value: 0, Setting: math.NaN(), Instrument: "manometer", Sigma: 100}
	}, want: []string{`readings.csv:6: boundary is the measured differential but state "as-found" reads 0 Pa, which drives no flow`}},
	{name: "constant differential of 3 Pa", edit: func(t *testing.T, s *site.Site) {
		s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 3, Sensor: site.AtPump}
		s.Pump = nil
		simulate(t, s)
	}, want: []string{"cannot-reach-design", "57.4 kPa at the pump", "4 of 4"},
		// The 3 Pa before gives a few microwatts: no percentage of it.
		files: map[string][]string{"report.html": {"pump electrical power 0 W -&gt; ", "kWh a year more ("}}},
	{name: "constant differential of 3 Pa, readings at 56 kPa", edit: func(t *testing.T, s *site.Site) {
		simulate(t, s)
		s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 3, Sensor: site.AtPump}
		s.Pump = nil
	}, want: []string{"Fit: the readings disagree with the model far beyond their stated uncertainties"},
		files: map[string][]string{
			"report.html":      {"Warning: the readings disagree with the model"},
			"calibration.json": {`"the readings disagree with the model`},
		}},

	// Surveys that cannot tell the parameters apart.
	{name: "two identical branches read only at the pump", edit: func(t *testing.T, s *site.Site) {
		nan := math.NaN()
		s.Branches[1] = s.Branches[0]
		s.Branches[1].ID = "b"
		s.Readings = []site.Reading{
			{State: "as-found", Where: site.AtPump, What: site.TotalFlow, Setting: nan, Instrument: "clamp-on"},
			{State: "as-found", Where: site.AtPump, What: site.PumpDiff, Setting: nan, Instrument: "manometer"},
		}
		simulate(t, s)
	}, // Neither branch is seen on its own: both keep the whole fault
		// mixture's spread, and the two readings are spent on them with the
		// pump (no degree of freedom left, nothing scaled by χ²).
		want:  []string{"a (undetermined, info)", "b (undetermined, info)"},
		files: map[string][]string{"calibration.json": {`"degrees_of_freedom": 0`}}},
	{name: "two identical branches with identical flows", edit: func(t *testing.T, s *site.Site) {
		s.Branches[1] = s.Branches[0]
		s.Branches[1].ID = "b"
		simulate(t, s)
		s.Readings[1].Value = s.Readings[0].Value
	}, want: []string{"4 of 4"}},
	{name: "only a pump differential", edit: func(t *testing.T, s *site.Site) {
		s.Readings = s.Readings[4:]
		simulate(t, s)
	}, want: []string{"a (undetermined, info)", "d (undetermined, info)"}},
	{name: "no readings", edit: func(t *testing.T, s *site.Site) { s.Readings = nil },
		want: []string{"No readings: nothing to fit; the model stays at design", "Plan from design data only"},
		not:  []string{"posterior sd", "undetermined"}},
	{name: "design only with readings", args: []string{"--design-only"}, edit: func(t *testing.T, s *site.Site) { simulate(t, s) },
		want: []string{"Design only: the readings are not used", "Plan from design data only"},
		not:  []string{"no readings", "posterior sd"}},

	// Topology.
	{name: "a branch with nothing in it", code: ExitData, edit: func(t *testing.T, s *site.Site) {
		b := &s.Branches[3]
		b.PipeLength, b.FittingsK, b.TerminalDrop, b.Valve, b.Setting = 0, 0, 0, "", math.NaN()
		s.Readings = s.Readings[:3]
	}, want: []string{`branches.csv:5: branch "d" has nothing that resists flow`}},
	{name: "branches in a loop", code: ExitData, edit: func(t *testing.T, s *site.Site) {
		s.Branches[1].Parent, s.Branches[2].Parent = "c", "b"
	}, want: []string{`field "parent": value "c": branches in a loop: b -> c -> b`}},

	// The largest and smallest values the sheets accept.
	{name: "huge numbers", code: ExitShort, edit: func(t *testing.T, s *site.Site) {
		for i := range s.Branches {
			b := &s.Branches[i]
			b.DesignFlow, b.PipeLength, b.FittingsK, b.TerminalDrop = 10, 1e4, 1e4, 1e7
			b.PipeBore, b.HeaderBore = 3, 3
		}
		s.Valves[0].Kv = []float64{1e5 / 16, 1e5 / 8, 1e5 / 4, 1e5 / 2, 1e5}
		s.Valves[0].Settings = []float64{1e6 / 16, 1e6 / 8, 1e6 / 4, 1e6 / 2, 1e6}
		for i := range s.Branches {
			s.Branches[i].Setting = 1e6 / 2
		}
		for i := range s.Pump {
			s.Pump[i].Head *= 1000 / 8.0
			s.Pump[i].Flow *= 10 / 3e-3
		}
		simulate(t, s)
	}, want: []string{"THIS PLAN CANNOT MEET ITS TARGETS"}},
	{name: "tiny numbers", code: ExitShort, edit: func(t *testing.T, s *site.Site) {
		for i := range s.Branches {
			b := &s.Branches[i]
			b.DesignFlow, b.PipeLength, b.FittingsK, b.TerminalDrop = 1e-7, 1e-3, 0, 1
			b.PipeBore, b.HeaderBore = 1e-3, 1e-3
		}
		s.Valves[0].Kv = []float64{1e-6, 2e-6, 4e-6, 8e-6, 1.6e-5}
		for i := range s.Pump {
			s.Pump[i].Head *= 1e-3
			s.Pump[i].Flow *= 1e-4
		}
		simulate(t, s)
	}, want: []string{"cannot-reach-design"}},
}

// TestRunEdgeCases runs the whole job on sites at the edges of what it can
// do and checks that it either refuses with a message naming the cell and
// the reason, or finishes with sound numbers in every output.
func TestRunEdgeCases(t *testing.T) {
	for _, c := range edgeCases {
		t.Run(c.name, func(t *testing.T) {
			s := edgeSite()
			c.edit(t, s)
			dir := writeSite(t, s)
			out := filepath.Join(t.TempDir(), "out")
			code, stdout, errs := run(t, append([]string{"run", dir, "--out", out}, c.args...)...)
			if code != c.code {
				t.Fatalf("run: exit %d, want %d\nstdout:\n%s\nstderr:\n%s", code, c.code, stdout, errs)
			}
			said := stdout
			if code != ExitOK && code != ExitShort {
				said = errs
				if _, err := os.Stat(out); err == nil {
					t.Errorf("a refused run left an output folder")
				}
			}
			// The console wraps long lines: compare with the spaces folded.
			flat := strings.Join(strings.Fields(said), " ")
			for _, w := range c.want {
				if !strings.Contains(flat, w) {
					t.Errorf("run does not say %q:\n%s", w, said)
				}
			}
			for _, w := range c.not {
				if strings.Contains(stdout, w) {
					t.Errorf("run says %q:\n%s", w, stdout)
				}
			}
			for f, wants := range c.files {
				b, err := os.ReadFile(filepath.Join(out, f))
				if err != nil {
					t.Fatal(err)
				}
				for _, w := range wants {
					if !strings.Contains(string(b), w) {
						t.Errorf("%s does not hold %q", f, w)
					}
				}
			}
			bad := scanText("stdout", stdout)
			if code == ExitOK || code == ExitShort {
				bad = append(bad, scanOutputs(t, out)...)
				bad = append(bad, planNulls(t, out)...)
			}
			for _, b := range bad {
				t.Errorf("non-finite number: %s", b)
			}
		})
	}
}
