package diagnose

import (
	"testing"

	"github.com/google/go-cmp/cmp"
)

// TestControllers checks the controller flags: wide open where the model
// says so, off its set point where a reading lies beyond its expanded
// uncertainty (k = 2, the usual coverage; common practice) and the test's
// confidence reaches the threshold.
func TestControllers(t *testing.T) {
	tests := []struct {
		name string
		c    Controller
		want []Code
	}{
		{"holding, read at its set point", Controller{ID: "R1", SetPoint: 30e3, Readings: []SpanReading{{Label: "r:2", State: "a", Value: 30.4e3, Sigma: 300}}}, nil},
		{"holding, read within 2 sd", Controller{ID: "R1", SetPoint: 30e3, Readings: []SpanReading{{Value: 30.5e3, Sigma: 300}}}, nil},
		{"holding, read 5 sd above", Controller{ID: "R1", SetPoint: 30e3, Readings: []SpanReading{{Value: 31.5e3, Sigma: 300}}}, []Code{ControllerOffSet}},
		{"holding, read 5 sd below", Controller{ID: "R1", SetPoint: 30e3, Readings: []SpanReading{{Value: 28.5e3, Sigma: 300}}}, []Code{ControllerOffSet}},
		{"wide open", Controller{ID: "R1", SetPoint: 30e3, Open: true, State: "a", Span: 22e3}, []Code{ControllerOpen}},
		{"no uncertainty", Controller{ID: "R1", SetPoint: 30e3, Readings: []SpanReading{{Value: 10e3}}}, nil},
		{"fitted within 5 %", Controller{ID: "R1", SetPoint: 30e3, Held: 29e3, Lo: 28e3, Hi: 30e3}, nil},
		{"fitted 20 % low, not read", Controller{ID: "R1", SetPoint: 30e3, Held: 24e3, Lo: 23.5e3, Hi: 24.5e3}, []Code{ControllerOffSet}},
		{"fitted 20 % low and read so", Controller{ID: "R1", SetPoint: 30e3, Held: 24e3, Lo: 23.5e3, Hi: 24.5e3, Readings: []SpanReading{{Value: 24e3, Sigma: 300}}}, []Code{ControllerOffSet}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var got []Code
			for _, f := range Controllers([]Controller{tc.c}, Thresholds{}) {
				got = append(got, f.Code)
				if f.Branch != "R1" || f.Message == "" || f.Evidence == "" || f.Action == "" {
					t.Errorf("finding %+v: want the branch, a message, evidence and an action", f)
				}
			}
			if diff := cmp.Diff(tc.want, got); diff != "" {
				t.Errorf("codes (-want +got):\n%s", diff)
			}
		})
	}
}
