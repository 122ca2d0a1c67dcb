package hydraulics

import (
	"errors"
	"testing"
)

func TestDiffControllerDrop(t *testing.T) {
	c := DiffController{Kvs: 4, SetPoint: 20e3, Hold: 2e-3}
	if err := c.Validate(); err != nil {
		t.Fatal(err)
	}
	for _, q := range []float64{0, 1e-4, 1.5e-3, 1.999e-3, 2.001e-3, 2.5e-3, 5e-3} {
		dp, _ := c.Drop(q, water20)
		open, _ := KvDrop(q, c.Kvs, water20.Density)
		if q <= c.Hold {
			// Wide open below the held flow: the Kvs law alone.
			if dp != open || c.Holding(q) || c.Throttle(q) != 0 {
				t.Errorf("Drop(%g) = %g, want the wide-open %g, not holding", q, dp, open)
			}
		} else {
			// Above it the excess is throttled: a set point's worth of
			// throttling for a ControllerDroop rise of the flow.
			want := open + c.SetPoint*(q-c.Hold)/(ControllerDroop*c.Hold)
			if relErr(dp, want) > 1e-12 || !c.Holding(q) || relErr(c.Throttle(q), want-open) > 1e-12 {
				t.Errorf("Drop(%g) = %g, want %g, holding", q, dp, want)
			}
		}
		if q != 0 && q != c.Hold {
			checkSlope(t, "controller", c, q, 1e-6, water20, 1e-5)
		}
		checkOdd(t, "controller", c, q, water20)
	}
	for _, bad := range []DiffController{{Kvs: 0, SetPoint: 1, Hold: 1}, {Kvs: 1, SetPoint: -1, Hold: 1}, {Kvs: 1, SetPoint: 1}} {
		if err := bad.Validate(); !errors.Is(err, ErrInvalid) {
			t.Errorf("Validate(%+v) = %v, want ErrInvalid", bad, err)
		}
	}
}
