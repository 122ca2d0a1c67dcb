package diagnose

import (
	"math"
	"strings"
	"testing"
)

// TestHeld checks the findings about pressure-independent valves: a valve
// below its hold differential is starved; a fitted flow scale whose 95 %
// interval lies beyond 5 % of 1 is a setting that does not give its flow
// (the 5 % is common practice, no source); a branch whose valve regulates
// in every state is undetermined with the reason said.
func TestHeld(t *testing.T) {
	nan := math.NaN()
	base := func(h *Held) Branch {
		return Branch{ID: "F", Ratio: 1, LogSD: 0.1, Determined: true, FaultProb: nan, DataLn: nan, DataSD: nan, DesignDrop: nan,
			Target: 2e-4, OpenFlow: nan, Held: h}
	}
	for _, tc := range []struct {
		name string
		b    Branch
		want []Code
		text string
	}{
		{"regulating, held its flow", func() Branch {
			b := base(&Held{Regulates: true, Scale: 1.01, Lo: 0.97, Hi: 1.05, Fitted: true, Determined: true})
			b.Determined = false
			return b
		}(), []Code{Undetermined}, "not identifiable while the valve regulates"},
		{"starved", base(&Held{Starved: []HeldState{{State: "as-found", ValveDiff: 10e3, HoldDiff: 25e3, Flow: 1.2e-4, SetFlow: 2e-4}}, Scale: 1, Lo: 0.9, Hi: 1.1}),
			[]Code{ValveStarved}, "as-found: 10.0 kPa across the valve, which holds its flow from 25.0 kPa; flow 0.12 l/s against 0.2 l/s set"},
		{"off its flow", base(&Held{Scale: 0.8, Lo: 0.77, Hi: 0.83, Fitted: true, Determined: true}), []Code{ValveOffFlow}, "passes 0.80 of its table's flow"},
		{"within 5 %", base(&Held{Scale: 0.97, Lo: 0.93, Hi: 1.01, Fitted: true, Determined: true}), nil, ""},
		{"off but not determined", base(&Held{Scale: 0.8, Lo: 0.77, Hi: 0.83, Fitted: true}), nil, ""},
	} {
		t.Run(tc.name, func(t *testing.T) {
			fs := Check([]Branch{tc.b}, nil, Thresholds{})
			var got []Code
			var text string
			for _, f := range fs {
				got = append(got, f.Code)
				text += f.Message + " | " + f.Evidence + "\n"
			}
			if len(got) != len(tc.want) || (len(got) > 0 && got[0] != tc.want[0]) {
				t.Fatalf("codes %v, want %v\n%s", got, tc.want, text)
			}
			if !strings.Contains(text, tc.text) {
				t.Errorf("findings do not say %q:\n%s", tc.text, text)
			}
		})
	}
	if ValveStarved.String() != "valve-starved" || ValveOffFlow.String() != "valve-off-flow" {
		t.Errorf("code names %q %q", ValveStarved, ValveOffFlow)
	}
}
