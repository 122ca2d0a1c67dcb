package diagnose

import (
	"math"
	"strings"
	"testing"
)

// TestNormalCDF checks the distribution function against standard normal
// tables (Abramowitz & Stegun, Handbook of Mathematical Functions, Table
// 26.1): Phi(1.645) = 0.95002, Phi(1.96) = 0.97500, Phi(3) = 0.99865.
func TestNormalCDF(t *testing.T) {
	for _, c := range []struct{ z, want float64 }{{0, 0.5}, {1.645, 0.95002}, {1.96, 0.97500}, {3, 0.99865}, {-1.96, 0.02500}} {
		if got := normalCDF(c.z); math.Abs(got-c.want) > 1e-5 {
			t.Errorf("normalCDF(%g) = %.6f, want %.5f", c.z, got, c.want)
		}
	}
}

// TestChi2Confidence checks the one-degree-of-freedom chi-square test
// against its table values (Abramowitz & Stegun Table 26.8: the 95 % point of
// chi-square with 1 degree of freedom is 3.841, the 99 % point 6.635).
func TestChi2Confidence(t *testing.T) {
	for _, c := range []struct{ d, want float64 }{{3.841, 0.95}, {6.635, 0.99}, {0, 0}} {
		if got := chi2Confidence(c.d); math.Abs(got-c.want) > 1e-4 {
			t.Errorf("chi2Confidence(%g) = %.5f, want %.3f", c.d, got, c.want)
		}
	}
}

func codes(fs []Finding, branch string) []Code {
	var out []Code
	for _, f := range fs {
		if f.Branch == branch {
			out = append(out, f.Code)
		}
	}
	return out
}

func TestCheck(t *testing.T) {
	sd := 0.1
	// At ratio 1.5*exp(1.645 sd) the probability of exceeding 1.5 is 0.95
	// (the one-sided 95 % normal point, A&S Table 26.1).
	edge := 1.5 * math.Exp(1.645*sd)
	cases := []struct {
		name string
		b    Branch
		want []Code
	}{
		{"clean", Branch{ID: "x", Ratio: 1.05, LogSD: sd, Determined: true, OpenFlow: math.NaN()}, nil},
		{"fouled", Branch{ID: "x", Ratio: 3, LogSD: sd, Determined: true, OpenFlow: math.NaN()}, []Code{Restricted}},
		{"just above the confidence edge", Branch{ID: "x", Ratio: edge * 1.01, LogSD: sd, Determined: true, OpenFlow: math.NaN()}, []Code{Restricted}},
		{"just below the confidence edge", Branch{ID: "x", Ratio: edge * 0.99, LogSD: sd, Determined: true, OpenFlow: math.NaN()}, nil},
		{"high but uncertain", Branch{ID: "x", Ratio: 2, LogSD: 0.5, Determined: true, OpenFlow: math.NaN()}, nil},
		{"free", Branch{ID: "x", Ratio: 0.3, LogSD: sd, Determined: true, OpenFlow: math.NaN()}, []Code{Free}},
		{"free behind a valve the readings cannot separate", Branch{ID: "x", Ratio: 0.3, LogSD: sd, Determined: true, OpenFlow: math.NaN(), HasValve: true}, []Code{ValveMisSet}},
		{"free behind a valve tested on its table", Branch{ID: "x", Ratio: 0.3, LogSD: sd, Determined: true, OpenFlow: math.NaN(), HasValve: true, Valve: &Valve{Hypothesis: "follows its table"}}, []Code{ValveMisSet}},
		{"fouled by its part", Branch{ID: "x", Ratio: 1.3, LogSD: 0.05, Determined: true, OpenFlow: math.NaN(), DataLn: math.Log(1.35), DataSD: 0.04, DesignDrop: 60e3, FaultProb: math.NaN()}, []Code{Restricted}},
		{"within a clean branch's scatter", Branch{ID: "x", Ratio: 1.1, LogSD: 0.05, Determined: true, OpenFlow: math.NaN(), DataLn: math.Log(1.12), DataSD: 0.04, DesignDrop: 60e3, FaultProb: math.NaN()}, nil},
		{"undetermined", Branch{ID: "x", Ratio: 1, LogSD: 1, OpenFlow: math.NaN()}, []Code{Undetermined}},
		{"stuck valve", Branch{ID: "x", Ratio: 1, LogSD: sd, Determined: true, OpenFlow: math.NaN(), Valve: &Valve{Hypothesis: "holds one Kv", DeltaChi2: 20}}, []Code{ValveStuck}},
		{"mis-set valve", Branch{ID: "x", Ratio: 1, LogSD: sd, Determined: true, OpenFlow: math.NaN(), Valve: &Valve{Hypothesis: "set elsewhere", DeltaChi2: 12, Recorded: 3, Implied: 1.2, Unit: "turns"}}, []Code{ValveMisSet}},
		{"valve follows its table", Branch{ID: "x", Ratio: 1, LogSD: sd, Determined: true, OpenFlow: math.NaN(), Valve: &Valve{Hypothesis: "follows its table"}}, nil},
		{"short with valve open", Branch{ID: "x", Ratio: 1, LogSD: sd, Determined: true, Target: 1, OpenFlow: 0.85}, []Code{CannotReachDesign}},
		{"within band with valve open", Branch{ID: "x", Ratio: 1, LogSD: sd, Determined: true, Target: 1, OpenFlow: 0.95}, nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := codes(Check([]Branch{c.b}, nil, Thresholds{}), "x")
			if len(got) != len(c.want) {
				t.Fatalf("Check codes = %v, want %v", got, c.want)
			}
			for i := range got {
				if got[i] != c.want[i] {
					t.Fatalf("Check codes = %v, want %v", got, c.want)
				}
			}
		})
	}
}

// TestCheckFreeOnTestPoints: a branch passing far more than designed
// behind a valve the readings cannot separate is said to be so; where its
// flow was read only at its own valve's test points, the finding names
// those reading high as the other explanation and asks for a clamp-on
// reading first, and not otherwise.
func TestCheckFreeOnTestPoints(t *testing.T) {
	for _, tc := range []struct {
		name                string
		testPoints, hasFlow bool
		named               bool
	}{
		{"read only at its test points", true, false, true},
		{"read at its test points and by clamp-on", true, true, false},
		{"not read at its valve", false, false, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			b := Branch{ID: "x", Ratio: 0.3, LogSD: 0.1, Determined: true, OpenFlow: math.NaN(), HasValve: true, TestPoints: tc.testPoints, HasFlow: tc.hasFlow}
			fs := Check([]Branch{b}, nil, Thresholds{})
			if len(fs) != 1 || fs[0].Code != ValveMisSet {
				t.Fatalf("findings %+v, want one %v", fs, ValveMisSet)
			}
			named := strings.Contains(fs[0].Message, "test points reading high") && strings.Contains(fs[0].Action, "clamp-on")
			if named != tc.named {
				t.Errorf("test points named %v, want %v: %q / %q", named, tc.named, fs[0].Message, fs[0].Action)
			}
		})
	}
}

func TestSuspectReadings(t *testing.T) {
	rs := []Reading{
		{Label: "readings.csv:4", Where: "a", What: "flow", Normalised: 0.8},
		{Label: "readings.csv:5", Where: "a", What: "flow", Normalised: -4.2},
		{Label: "readings.csv:6", Where: "pump", What: "pump diff", Normalised: 1, Outlier: true},
	}
	fs := Check(nil, rs, Thresholds{})
	if len(fs) != 2 {
		t.Fatalf("Check found %d suspect readings, want 2: %+v", len(fs), fs)
	}
	if fs[0].Reading != "readings.csv:5" || fs[1].Reading != "readings.csv:6" || fs[1].Branch != "" {
		t.Errorf("suspect readings %q (%q) and %q (%q), want readings.csv:5 at a and readings.csv:6 at the pump", fs[0].Reading, fs[0].Branch, fs[1].Reading, fs[1].Branch)
	}
}

func TestOrderBySeverity(t *testing.T) {
	fs := Check([]Branch{
		{ID: "a", Ratio: 1, LogSD: 1, OpenFlow: math.NaN()},
		{ID: "b", Ratio: 4, LogSD: 0.1, Determined: true, OpenFlow: math.NaN()},
	}, nil, Thresholds{})
	if len(fs) != 2 || fs[0].Code != Restricted || fs[1].Code != Undetermined {
		t.Fatalf("Check order = %+v, want the fault before the info", fs)
	}
}

// TestCheckAssumedElsewhere: a valve the fit took as set elsewhere on the
// prior alone (read at its test points alone, its branch otherwise far
// freer than designed) is a mis-set valve whose evidence is the ratio the
// table would give, with no confidence quoted (its readings say the same
// either way), its test points named as the other explanation and a
// clamp-on asked for first; one found so by its readings keeps its
// chi-square and confidence.
func TestCheckAssumedElsewhere(t *testing.T) {
	for _, tc := range []struct {
		name    string
		assumed bool
	}{{"on the prior", true}, {"by its readings", false}} {
		t.Run(tc.name, func(t *testing.T) {
			b := Branch{ID: "x", Ratio: 1, LogSD: 0.69, Determined: true, OpenFlow: math.NaN(), HasValve: true, TestPoints: true,
				Valve: &Valve{Hypothesis: "set elsewhere", DeltaChi2: 12, Recorded: 100, Implied: 87.1, Unit: "%", Assumed: tc.assumed, TableRatio: 0.43}}
			var f *Finding
			for _, x := range Check([]Branch{b}, nil, Thresholds{}) {
				if x.Code == ValveMisSet {
					f = &x
				}
			}
			if f == nil {
				t.Fatalf("no %v finding", ValveMisSet)
			}
			named := strings.Contains(f.Message, "test points reading high") && strings.Contains(f.Action, "clamp-on") && strings.Contains(f.Evidence, "0.43 x design")
			if named != tc.assumed || math.IsNaN(f.Confidence) != tc.assumed {
				t.Errorf("test points and table ratio named %v, confidence %v: want named %v, NaN %v (%q / %q / %q)", named, f.Confidence, tc.assumed, tc.assumed, f.Message, f.Evidence, f.Action)
			}
		})
	}
}

// TestCheckFreeByPartEvidence: a branch flagged free on its part alone (its
// readings put it under a clean branch's scatter, 1/1.2 of design, while the
// fitted ratio, 0.84 with an ln sd of 0.03, is nowhere near 1/1.5) is not
// said to lie under 1/1.5 with the part test's probability: its evidence
// names the part test's edge and the drop it takes off at design flow
// ((1 - 0.84) x 60 kPa = 9.6 kPa, worked by hand). One flagged on its fitted
// ratio keeps that ratio's probability.
func TestCheckFreeByPartEvidence(t *testing.T) {
	byPart := Branch{ID: "x", Ratio: 0.84, LogSD: 0.03, Determined: true, OpenFlow: math.NaN(), HasValve: true,
		DataLn: math.Log(0.7), DataSD: 0.04, DesignDrop: 60e3, FaultProb: math.NaN()}
	byRatio := Branch{ID: "x", Ratio: 0.3, LogSD: 0.1, Determined: true, OpenFlow: math.NaN(), HasValve: true}
	for _, tc := range []struct {
		name      string
		b         Branch
		want, not string
	}{
		{"by its part", byPart, "about 9.6 kPa less than designed at design flow (resistance 0.84 x design, 95 % interval 0.79-0.89) with the valve taken at its recorded setting; the readings alone put it below 0.83 x design with probability 1.000", "P(ratio <"},
		{"by its fitted ratio", byRatio, "with the valve taken at its recorded setting; P(ratio < 0.67) = 1.000", "readings alone"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			fs := Check([]Branch{tc.b}, nil, Thresholds{})
			if len(fs) != 1 || fs[0].Code != ValveMisSet {
				t.Fatalf("findings %+v, want one %v", fs, ValveMisSet)
			}
			if !strings.Contains(fs[0].Evidence, tc.want) || strings.Contains(fs[0].Evidence, tc.not) {
				t.Errorf("evidence %q: want %q, not %q", fs[0].Evidence, tc.want, tc.not)
			}
		})
	}
}
