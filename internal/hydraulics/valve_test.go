package hydraulics

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"
)

func TestInherentEqualPercentage(t *testing.T) {
	// [C] computed from the IEC 60534 equal-percentage definition φ =
	// R^(h-1), references §3.4 (5 decimals).
	tests := []struct {
		r    float64
		h    []float64
		want []float64
	}{
		{50, []float64{0, 0.25, 0.5, 0.75, 1}, []float64{0.02, 0.05318, 0.14142, 0.37606, 1}},
		{30, []float64{0, 0.25, 0.5, 0.75, 1}, []float64{0.03333, 0.07801, 0.18257, 0.42729, 1}},
	}
	for _, tc := range tests {
		c := Inherent{Kind: EqualPercentage, Kvs: 10, Rangeability: tc.r}
		for i, h := range tc.h {
			kv, err := c.KvAt(h)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(kv/10-tc.want[i]) > 5e-6 {
				t.Errorf("R=%g: φ(%g) = %.6f, want %.5f", tc.r, h, kv/10, tc.want[i])
			}
		}
	}
}

func TestInherentKinds(t *testing.T) {
	// Closed-form values of the documented idealisations at R = 50.
	tests := []struct {
		kind Kind
		h    float64
		phi  float64
	}{
		{Linear, 0, 0.02},
		{Linear, 0.5, 0.02 + 0.98*0.5},
		{Linear, 1, 1},
		{QuickOpening, 0, 0.02},
		{QuickOpening, 0.25, 0.02 + 0.98*0.5},
		{QuickOpening, 1, 1},
		{EqualPercentage, 0.5, 1 / math.Sqrt(50)},
	}
	for _, tc := range tests {
		t.Run(fmt.Sprintf("%v h=%g", tc.kind, tc.h), func(t *testing.T) {
			c := Inherent{Kind: tc.kind, Kvs: 4, Rangeability: 50}
			kv, slope, err := c.KvSlope(tc.h)
			if err != nil {
				t.Fatal(err)
			}
			if relErr(kv, 4*tc.phi) > 1e-14 {
				t.Errorf("KvAt(%g) = %g, want %g", tc.h, kv, 4*tc.phi)
			}
			h, err := c.SettingFor(kv)
			if err != nil || math.Abs(h-tc.h) > 1e-12 {
				t.Errorf("SettingFor(%g) = %g, %v; want %g", kv, h, err, tc.h)
			}
			if tc.h > 0 && tc.h < 1 {
				d := 1e-6
				up, _ := c.KvAt(tc.h + d)
				dn, _ := c.KvAt(tc.h - d)
				if relErr(slope, (up-dn)/(2*d)) > 1e-6 {
					t.Errorf("dKv/dh = %g, finite difference %g", slope, (up-dn)/(2*d))
				}
			}
		})
	}
}

func TestInherentErrors(t *testing.T) {
	tests := []struct {
		name string
		c    Inherent
		h    float64
		want error
	}{
		{"travel above 1", Inherent{Kind: Linear, Kvs: 1, Rangeability: 30}, 1.01, ErrOutOfRange},
		{"negative travel", Inherent{Kind: Linear, Kvs: 1, Rangeability: 30}, -0.1, ErrOutOfRange},
		{"NaN travel", Inherent{Kind: Linear, Kvs: 1, Rangeability: 30}, math.NaN(), ErrOutOfRange},
		{"zero kvs", Inherent{Kind: Linear, Rangeability: 30}, 0.5, ErrInvalid},
		{"rangeability 1", Inherent{Kind: Linear, Kvs: 1, Rangeability: 1}, 0.5, ErrInvalid},
		{"unknown kind", Inherent{Kind: 7, Kvs: 1, Rangeability: 30}, 0.5, ErrInvalid},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if kv, err := tc.c.KvAt(tc.h); !errors.Is(err, tc.want) {
				t.Errorf("KvAt(%g) = %g, %v; want %v", tc.h, kv, err, tc.want)
			}
		})
	}
	c := Inherent{Kind: EqualPercentage, Kvs: 10, Rangeability: 50}
	for _, kv := range []float64{0.1, 10.5} {
		if _, err := c.SettingFor(kv); !errors.Is(err, ErrOutOfRange) {
			t.Errorf("SettingFor(%g) error = %v, want ErrOutOfRange", kv, err)
		}
	}
}

// handwheel is an invented 8-turn balancing valve table (for tests only),
// convex near closed as real tables are.
func handwheel() Table {
	return Table{
		Settings: []float64{0.5, 1, 1.5, 2, 3, 4, 5, 6, 7, 8},
		Kv:       []float64{0.12, 0.25, 0.42, 0.63, 1.1, 1.7, 2.4, 3.1, 3.7, 4.1},
		Step:     0.1,
	}
}

func TestTableInterpolation(t *testing.T) {
	tb := handwheel()
	// Passes through every point.
	for i, s := range tb.Settings {
		kv, err := tb.KvAt(s)
		if err != nil || relErr(kv, tb.Kv[i]) > 1e-14 {
			t.Errorf("KvAt(%g) = %g, %v; want %g", s, kv, err, tb.Kv[i])
		}
	}
	// Monotone, continuous slope, and the inverse returns the setting.
	prev := 0.0
	for s := 0.5; s <= 8; s += 0.01 {
		kv, slope, err := tb.KvSlope(s)
		if err != nil {
			t.Fatal(err)
		}
		if kv < prev || slope < 0 {
			t.Fatalf("KvAt(%g) = %g (slope %g) after %g: not monotone", s, kv, slope, prev)
		}
		prev = kv
		back, err := tb.SettingFor(kv)
		if err != nil || math.Abs(back-s) > 1e-9 {
			t.Errorf("SettingFor(KvAt(%g)=%g) = %g, %v", s, kv, back, err)
		}
		if s > 0.6 && s < 7.9 {
			d := 1e-6
			up, _ := tb.KvAt(s + d)
			dn, _ := tb.KvAt(s - d)
			if relErr(slope, (up-dn)/(2*d)) > 1e-5 {
				t.Errorf("dKv/ds(%g) = %g, finite difference %g", s, slope, (up-dn)/(2*d))
			}
		}
	}
}

func TestTableReproducesEqualPercentage(t *testing.T) {
	// Closed form: a table sampled from φ = R^(h-1) has ln Kv linear in
	// the setting, which the monotone cubic in ln Kv reproduces exactly
	// between the points; linear interpolation in Kv would not (it
	// overestimates a convex curve), which is why ln Kv is interpolated.
	c := Inherent{Kind: EqualPercentage, Kvs: 6.3, Rangeability: 50}
	var tb Table
	for h := 0.0; h <= 1.0001; h += 0.2 {
		kv, _ := c.KvAt(h)
		tb.Settings = append(tb.Settings, h)
		tb.Kv = append(tb.Kv, kv)
	}
	for _, h := range []float64{0.05, 0.1, 0.33, 0.5, 0.77, 0.95} {
		got, _ := tb.KvAt(h)
		want, _ := c.KvAt(h)
		if relErr(got, want) > 1e-12 {
			t.Errorf("table KvAt(%g) = %.12g, characteristic %.12g", h, got, want)
		}
	}
}

func TestTableTwoPointsAndFlat(t *testing.T) {
	// Two points: geometric interpolation Kv = Kv0 (Kv1/Kv0)^u.
	tb := Table{Settings: []float64{0, 10}, Kv: []float64{1, 4}}
	if kv, _ := tb.KvAt(5); relErr(kv, 2) > 1e-14 {
		t.Errorf("two-point KvAt(5) = %g, want 2", kv)
	}
	// A flat part stays flat, and SettingFor returns its lowest setting.
	tb = Table{Settings: []float64{0, 1, 2, 3}, Kv: []float64{0.5, 1, 1, 2}}
	for _, s := range []float64{1, 1.3, 1.7, 2} {
		if kv, _ := tb.KvAt(s); kv != 1 {
			t.Errorf("flat KvAt(%g) = %.17g, want 1", s, kv)
		}
	}
	if s, err := tb.SettingFor(1); err != nil || s != 1 {
		t.Errorf("SettingFor(1) on flat part = %g, %v; want 1", s, err)
	}
}

func TestTableErrors(t *testing.T) {
	tests := []struct {
		name    string
		tb      Table
		setting float64
		want    error
		msg     string
	}{
		{"one point", Table{Settings: []float64{1}, Kv: []float64{1}}, 1, ErrInvalid, "at least 2"},
		{"length mismatch", Table{Settings: []float64{1, 2}, Kv: []float64{1}}, 1, ErrInvalid, "at least 2"},
		{"settings not increasing", Table{Settings: []float64{1, 1}, Kv: []float64{1, 2}}, 1, ErrInvalid, "increase"},
		{"kv decreasing", Table{Settings: []float64{1, 2}, Kv: []float64{2, 1}}, 1, ErrInvalid, "not decrease"},
		{"kv zero", Table{Settings: []float64{0, 2}, Kv: []float64{0, 1}}, 1, ErrInvalid, "positive"},
		{"NaN setting", Table{Settings: []float64{math.NaN(), 2}, Kv: []float64{1, 2}}, 1, ErrInvalid, "NaN"},
		{"negative step", Table{Settings: []float64{0, 2}, Kv: []float64{1, 2}, Step: -1}, 1, ErrInvalid, "step"},
		{"below range", handwheel(), 0.4, ErrOutOfRange, "[0.5, 8]"},
		{"above range", handwheel(), 8.01, ErrOutOfRange, "[0.5, 8]"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			kv, err := tc.tb.KvAt(tc.setting)
			if !errors.Is(err, tc.want) || !strings.Contains(fmt.Sprint(err), tc.msg) {
				t.Errorf("KvAt(%g) = %g, %v; want %v mentioning %q", tc.setting, kv, err, tc.want, tc.msg)
			}
		})
	}
	for _, kv := range []float64{0.1, 4.2} {
		if _, err := handwheel().SettingFor(kv); !errors.Is(err, ErrOutOfRange) {
			t.Errorf("SettingFor(%g) error = %v, want ErrOutOfRange", kv, err)
		}
	}
}

func TestTableRound(t *testing.T) {
	tb := Table{Settings: []float64{0, 2.55}, Kv: []float64{0.1, 1}, Step: 0.25}
	tests := []struct {
		s    float64
		dir  RoundDir
		want float64
	}{
		{1.1, RoundDown, 1.0},
		{1.1, RoundUp, 1.25},
		{1.1, RoundNearest, 1.0},
		{1.2, RoundNearest, 1.25},
		{0.75 + 1e-12, RoundUp, 0.75}, // on a mark up to rounding noise
		{0.75 - 1e-12, RoundDown, 0.75},
		{2.55, RoundUp, 2.55}, // top of range is not a mark: stays inside
		{2.55, RoundDown, 2.5},
		{0, RoundDown, 0},
	}
	for _, tc := range tests {
		got, err := tb.Round(tc.s, tc.dir)
		if err != nil || math.Abs(got-tc.want) > 1e-12 {
			t.Errorf("Round(%g, %d) = %g, %v; want %g", tc.s, tc.dir, got, err, tc.want)
		}
	}
	if _, err := tb.Round(3, RoundDown); !errors.Is(err, ErrOutOfRange) {
		t.Errorf("Round(3) error = %v, want ErrOutOfRange", err)
	}
	tb.Step = 0
	if got, _ := tb.Round(1.234, RoundUp); got != 1.234 {
		t.Errorf("Round with Step 0 = %g, want 1.234", got)
	}
}

func TestValve(t *testing.T) {
	tb := handwheel()
	v := Valve{Char: tb, Setting: 3}
	dp, _ := v.Drop(1.1/3600, water20)
	want, _ := KvDrop(1.1/3600, 1.1, water20.Density)
	if relErr(dp, want) > 1e-14 {
		t.Errorf("Valve.Drop at Kv 1.1 = %g, want %g", dp, want)
	}
	v.KvScale = 0.9
	if kv, _ := v.Kv(); relErr(kv, 0.99) > 1e-14 {
		t.Errorf("Kv with scale 0.9 = %g, want 0.99", kv)
	}
	for _, q := range []float64{1e-6, 1e-4, 1e-3} {
		checkSlope(t, "valve", v, q, 1e-4, water20, 1e-6)
		checkSlope(t, "valve", v, -q, 1e-4, water20, 1e-6)
		checkOdd(t, "valve", v, q, water20)
	}
	if v.IsClosed() {
		t.Error("valve at setting 3 reported closed")
	}
}

func TestValveClosed(t *testing.T) {
	// A table whose first point is far below the leakage Kv: closed, finite.
	tb := Table{Settings: []float64{0, 1, 2}, Kv: []float64{1e-9, 0.5, 2}}
	v := Valve{Char: tb, Setting: 0}
	if !v.IsClosed() {
		t.Error("valve at Kv 1e-9 not reported closed")
	}
	dp, slope := v.Drop(1e-5, water20)
	want, wantSlope := KvDrop(1e-5, LeakageFraction*2, water20.Density)
	if relErr(dp, want) > 1e-14 || relErr(slope, wantSlope) > 1e-14 || math.IsInf(dp, 0) {
		t.Errorf("closed Drop = %g, %g; want leakage %g, %g", dp, slope, want, wantSlope)
	}
	// Invalid valves: NaN from Drop, error from Validate.
	for name, bad := range map[string]Valve{
		"no characteristic": {},
		"out of range":      {Char: tb, Setting: 5},
		"negative scale":    {Char: tb, Setting: 1, KvScale: -1},
	} {
		if err := bad.Validate(); err == nil {
			t.Errorf("%s: Validate() = nil", name)
		}
		if name != "negative scale" {
			if dp, _ := bad.Drop(1e-4, water20); !math.IsNaN(dp) {
				t.Errorf("%s: Drop = %g, want NaN", name, dp)
			}
		}
	}
}

// TestNewTableSameValues checks that a table made by NewTable gives
// bit-for-bit the values of the literal table (whose interpolation the
// tests above check against closed forms), and that it owns copies of its
// points.
func TestNewTableSameValues(t *testing.T) {
	for name, lit := range map[string]Table{
		"handwheel":  handwheel(),
		"two points": {Settings: []float64{0, 10}, Kv: []float64{1, 4}},
		"flat part":  {Settings: []float64{0, 1, 2, 3}, Kv: []float64{0.5, 1, 1, 2}, Step: 0.5},
	} {
		t.Run(name, func(t *testing.T) {
			settings, kv := slices.Clone(lit.Settings), slices.Clone(lit.Kv)
			tb, err := NewTable(settings, kv, lit.Step)
			if err != nil {
				t.Fatal(err)
			}
			if tb.prepared() == nil {
				t.Fatal("NewTable kept no precomputed values")
			}
			settings[0], kv[0] = -1, 1e9 // the caller's slices are not the table's
			lo, hi := lit.Range()
			for i := range 1001 {
				s := lo + (hi-lo)*float64(i)/1000
				k1, d1, err1 := lit.KvSlope(s)
				k2, d2, err2 := tb.KvSlope(s)
				if k1 != k2 || d1 != d2 || err1 != nil || err2 != nil {
					t.Fatalf("KvSlope(%g): literal %v %v %v, NewTable %v %v %v", s, k1, d1, err1, k2, d2, err2)
				}
				b1, err1 := lit.SettingFor(k1)
				b2, err2 := tb.SettingFor(k1)
				if b1 != b2 || err1 != nil || err2 != nil {
					t.Fatalf("SettingFor(%g): literal %v %v, NewTable %v %v", k1, b1, err1, b2, err2)
				}
				r1, _ := lit.Round(s, RoundUp)
				r2, _ := tb.Round(s, RoundUp)
				if r1 != r2 {
					t.Fatalf("Round(%g): literal %v, NewTable %v", s, r1, r2)
				}
			}
			for _, s := range []float64{lo - 0.1, hi + 0.1, math.NaN()} {
				if _, err := tb.KvAt(s); !errors.Is(err, ErrOutOfRange) {
					t.Errorf("KvAt(%g) error = %v, want ErrOutOfRange", s, err)
				}
			}
		})
	}
}

// TestNewTableChanged checks that a copy of a NewTable table given other
// points or a bad step behaves as the literal table with those values.
func TestNewTableChanged(t *testing.T) {
	hw := handwheel()
	tb, err := NewTable(hw.Settings, hw.Kv, hw.Step)
	if err != nil {
		t.Fatal(err)
	}
	c := tb
	c.Kv = []float64{0.2, 0.5, 0.84, 1.26, 2.2, 3.4, 4.8, 6.2, 7.4, 8.2} // twice the handwheel
	if got, _ := c.KvAt(3); relErr(got, 2.2) > 1e-14 {
		t.Errorf("copy with new Kv: KvAt(3) = %g, want 2.2", got)
	}
	c = tb
	c.Settings = c.Settings[:5]
	c.Kv = c.Kv[:5]
	if _, err := c.KvAt(3.5); !errors.Is(err, ErrOutOfRange) {
		t.Errorf("copy cut to 5 points: KvAt(3.5) error = %v, want ErrOutOfRange", err)
	}
	c = tb
	c.Step = -1
	if _, err := c.KvAt(3); !errors.Is(err, ErrInvalid) {
		t.Errorf("copy with step -1: KvAt error = %v, want ErrInvalid", err)
	}
	for name, bad := range map[string][2][]float64{
		"one point":  {{1}, {1}},
		"decreasing": {{1, 2}, {2, 1}},
	} {
		if _, err := NewTable(bad[0], bad[1], 0); !errors.Is(err, ErrInvalid) {
			t.Errorf("NewTable %s: error = %v, want ErrInvalid", name, err)
		}
	}
}

// TestNewValveSameValues checks that NewValve's valve gives bit-for-bit
// what the literal valve gives (checked against KvDrop above), including at
// the leakage floor, and that copies with another setting, scale or
// characteristic are worked out afresh.
func TestNewValveSameValues(t *testing.T) {
	hw := handwheel()
	prep, err := NewTable(hw.Settings, hw.Kv, hw.Step)
	if err != nil {
		t.Fatal(err)
	}
	leaky := Table{Settings: []float64{0, 1, 2}, Kv: []float64{1e-9, 0.5, 2}}
	inh := Inherent{Kind: EqualPercentage, Kvs: 4, Rangeability: 50}
	cases := []struct {
		name  string
		char  Characteristic
		set   float64
		scale float64
	}{
		{"table", hw, 3.3, 0},
		{"NewTable", prep, 0.5, 1.1},
		{"closed", leaky, 0, 0.8},
		{"inherent", inh, 0.6, 1},
	}
	same := func(t *testing.T, what string, got, want Valve) {
		t.Helper()
		for _, q := range []float64{-1e-3, -2e-5, 0, 3e-6, 4e-4} {
			d1, s1 := want.Drop(q, water20)
			d2, s2 := got.Drop(q, water20)
			if d1 != d2 || s1 != s2 {
				t.Errorf("%s: Drop(%g) = %v, %v; literal %v, %v", what, q, d2, s2, d1, s1)
			}
		}
		k1, err1 := want.Kv()
		k2, err2 := got.Kv()
		l1, _ := want.LeakageKv()
		l2, _ := got.LeakageKv()
		if k1 != k2 || (err1 == nil) != (err2 == nil) || l1 != l2 || want.IsClosed() != got.IsClosed() {
			t.Errorf("%s: Kv %v %v, leakage %v, closed %v; literal %v %v, %v, %v", what, k2, err2, l2, got.IsClosed(), k1, err1, l1, want.IsClosed())
		}
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			v, err := NewValve(tc.char, tc.set, tc.scale)
			if err != nil {
				t.Fatal(err)
			}
			if v.memoized() == nil {
				t.Error("NewValve kept no memo")
			}
			same(t, "NewValve", v, Valve{Char: tc.char, Setting: tc.set, KvScale: tc.scale})
			c := v
			c.Setting = tc.set + 0.25
			if c.memoized() != nil {
				t.Error("copy with a new setting uses the old memo")
			}
			same(t, "copy with new setting", c, Valve{Char: tc.char, Setting: c.Setting, KvScale: tc.scale})
			c = v
			c.KvScale = 0.5
			same(t, "copy with new scale", c, Valve{Char: tc.char, Setting: tc.set, KvScale: 0.5})
			c = v
			c.Char = Inherent{Kind: Linear, Kvs: 9, Rangeability: 30}
			c.Setting = 0.5
			same(t, "copy with new characteristic", c, Valve{Char: c.Char, Setting: 0.5, KvScale: tc.scale})
		})
	}
	// A table copy with other points is another characteristic.
	v, err := NewValve(prep, 3, 1)
	if err != nil {
		t.Fatal(err)
	}
	other := prep
	other.Kv = slices.Clone(prep.Kv)
	other.Kv[4] = 1.2
	v.Char = other
	same(t, "table copy with new points", v, Valve{Char: other, Setting: 3, KvScale: 1})
	// Invalid: the literal valve back, an error, NaN from Drop.
	for name, bad := range map[string][3]float64{"out of range": {9, 1}, "negative scale": {1, -1}, "NaN setting": {math.NaN(), 1}} {
		v, err := NewValve(hw, bad[0], bad[1])
		if !errors.Is(err, ErrInvalid) && !errors.Is(err, ErrOutOfRange) {
			t.Errorf("%s: NewValve error = %v", name, err)
		}
		if name != "negative scale" {
			if dp, _ := v.Drop(1e-4, water20); !math.IsNaN(dp) {
				t.Errorf("%s: Drop = %g, want NaN", name, dp)
			}
		}
	}
	if _, err := NewValve(nil, 0, 1); !errors.Is(err, ErrInvalid) {
		t.Errorf("NewValve(nil) error = %v, want ErrInvalid", err)
	}
}

func TestAuthority(t *testing.T) {
	// Engineering Toolbox worked example (references §3.5): circuit 15 kPa,
	// valve 60 kPa -> N = 0.8.
	n, err := Authority(60e3, 15e3)
	if err != nil || relErr(n, 0.8) > 1e-15 {
		t.Errorf("Authority(60 kPa, 15 kPa) = %g, %v; want 0.8", n, err)
	}
	for _, c := range [][2]float64{{0, 1e3}, {-1, 1e3}, {1e3, -1}, {math.NaN(), 1}} {
		if _, err := Authority(c[0], c[1]); !errors.Is(err, ErrInvalid) {
			t.Errorf("Authority(%g, %g) error = %v, want ErrInvalid", c[0], c[1], err)
		}
	}
}

func TestInstalledFlowRatio(t *testing.T) {
	// [C] references §3.5 at h = 0.5, from q/q100 = 1/√(1-N+N/φ²).
	eq := math.Pow(50, -0.5) // EQ% R=50 at h=0.5: 0.14142
	tests := []struct {
		name   string
		phi, n float64
		want   float64
	}{
		{"EQ% N=1", eq, 1, 0.14142},
		{"EQ% N=0.5", eq, 0.5, 0.19803},
		{"EQ% N=0.25", eq, 0.25, 0.27472},
		{"EQ% N=0.1", eq, 0.1, 0.41169},
		{"linear N=1", 0.5, 1, 0.5},
		{"linear N=0.5", 0.5, 0.5, 0.63246},
		{"linear N=0.25", 0.5, 0.25, 0.75593},
		{"linear N=0.1", 0.5, 0.1, 0.87706},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := InstalledFlowRatio(tc.phi, tc.n)
			if err != nil || math.Abs(got-tc.want) > 5e-6 {
				t.Errorf("InstalledFlowRatio(%g, %g) = %.6f, %v; want %.5f", tc.phi, tc.n, got, err, tc.want)
			}
		})
	}
	if _, err := InstalledFlowRatio(1.2, 0.5); !errors.Is(err, ErrOutOfRange) {
		t.Errorf("InstalledFlowRatio(1.2) error = %v, want ErrOutOfRange", err)
	}
	if got, _ := InstalledFlowRatio(0, 0.5); got != 0 {
		t.Errorf("InstalledFlowRatio(0, 0.5) = %g, want 0", got)
	}
}

func ExampleTable_SettingFor() {
	// Which handwheel position passes 0.4 m3/h with 10 kPa across the valve?
	tb := Table{
		Settings: []float64{0.5, 1, 1.5, 2, 3, 4},
		Kv:       []float64{0.12, 0.25, 0.42, 0.63, 1.1, 1.7},
		Step:     0.1,
	}
	kv, _ := KvFromDrop(0.4/3600, 10e3, KvRefDensity)
	s, err := tb.SettingFor(kv)
	if err != nil {
		fmt.Println(err)
		return
	}
	up, _ := tb.Round(s, RoundUp)
	fmt.Printf("Kv %.3f at setting %.3f, set the handwheel to %.1f\n", kv, s, up)
	// Output:
	// Kv 1.265 at setting 3.294, set the handwheel to 3.3
}

func BenchmarkValveDrop(b *testing.B) {
	hw := handwheel()
	prep, err := NewTable(hw.Settings, hw.Kv, hw.Step)
	if err != nil {
		b.Fatal(err)
	}
	inh := Inherent{Kind: EqualPercentage, Kvs: 4, Rangeability: 50}
	memo := func(c Characteristic, s float64) Valve {
		v, err := NewValve(c, s, 1)
		if err != nil {
			b.Fatal(err)
		}
		return v
	}
	for _, bc := range []struct {
		name string
		v    Valve
	}{
		{"table n=10", Valve{Char: hw, Setting: 3.3}},
		{"NewTable n=10", Valve{Char: prep, Setting: 3.3}},
		{"inherent", Valve{Char: inh, Setting: 0.6}},
		{"NewValve", memo(hw, 3.3)},
	} {
		b.Run(bc.name, func(b *testing.B) {
			for b.Loop() {
				bc.v.Drop(3e-4, water20)
			}
		})
	}
}

func BenchmarkTableSettingFor(b *testing.B) {
	hw := handwheel()
	prep, err := NewTable(hw.Settings, hw.Kv, hw.Step)
	if err != nil {
		b.Fatal(err)
	}
	for name, tb := range map[string]Table{"literal": hw, "NewTable": prep} {
		b.Run(name, func(b *testing.B) {
			for b.Loop() {
				if _, err := tb.SettingFor(1.37); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
