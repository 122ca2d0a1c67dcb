package cli

import (
	"context"
	"io"
	"testing"

	"flowset/internal/calibrate"
	"flowset/internal/diagnose"
	"flowset/internal/site"
)

// TestValveWord: the fit table's valve column says when a valve's
// hypothesis was taken on the prior (calibrate.ValveVerdict.Assumed), so
// a reader does not take it for one the readings tested.
func TestValveWord(t *testing.T) {
	for _, tc := range []struct {
		name string
		v    calibrate.ValveVerdict
		want string
	}{
		{"tested", calibrate.ValveVerdict{Hypothesis: calibrate.SetElsewhere}, "set elsewhere than recorded"},
		{"assumed", calibrate.ValveVerdict{Hypothesis: calibrate.SetElsewhere, Assumed: true}, "set elsewhere than recorded (assumed: its test points alone cannot tell)"},
		{"on its table", calibrate.ValveVerdict{Hypothesis: calibrate.FollowsTable}, "follows its table"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := valveWord(tc.v); got != tc.want {
				t.Errorf("valveWord = %q, want %q", got, tc.want)
			}
		})
	}
}

// TestFlowReadOffTable: the fit table's "flow as found" is a reading only
// where the reading is a flow; a valve meter's flow at a valve the fit
// finds set elsewhere was turned from its differential with the table at
// the recorded setting, so the model's flow stands in for it. The b03 of
// meterSite, its valve passing 0.45 of its recorded Kv (set elsewhere) or
// on its mark, its flow taken as the valve meter's.
func TestFlowReadOffTable(t *testing.T) {
	opts := &jobOptions{Scale: 1, Rounding: "smart", Thresholds: diagnose.DefaultThresholds()}
	for _, tc := range []struct {
		name string
		kv   float64
		read bool
	}{
		{"found set elsewhere", 0.45, false},
		{"on its mark", 1, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			j, err := runJob(context.Background(), meterSite(t, 1, tc.kv, 1, true), opts, &progress{w: io.Discard}, nil)
			if err != nil {
				t.Fatal(err)
			}
			if h := j.Cal.Branches[3].Valve.Hypothesis; (h == calibrate.SetElsewhere) == tc.read {
				t.Fatalf("construction: b03's valve %v", h)
			}
			for k := range j.L.Site.Readings {
				if r := &j.L.Site.Readings[k]; r.Where == "b03" && r.What == site.Flow {
					r.Instrument = "valve-meter"
				}
			}
			j.flowsRead = nil
			if _, ok := j.flowRead("b03"); ok != tc.read {
				t.Errorf("b03's valve-meter flow shown as read %v, want %v", ok, tc.read)
			}
			if _, ok := j.flowRead("b02"); !ok {
				t.Error("b02's clamp-on flow not shown as read")
			}
		})
	}
}
