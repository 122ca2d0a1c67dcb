package cli

import (
	"testing"

	"flowset/internal/calibrate"
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
