package calibrate

import (
	"fmt"
	"math"
	"testing"
)

// kvDrop is the square law of IEC 60534-2-1's Kv definition for water of
// specific gravity 1: Δp = (q/Kv)² bar with q in m3/h, in Pa and m3/s.
func kvDrop(kv float64) func(q float64) (float64, float64) {
	r := 1e5 / (kv * kv) * 3600 * 3600 // Pa per (m3/s)²
	return func(q float64) (float64, float64) { return r * q * q, 2 * r * q }
}

// tpKv is the test valve's table: Kv = 4·2^(s-1) m3/h over settings
// 0.5-4, so settings 1 and 2 give Kv 4 and 8.
func tpKv(s float64) float64 { return 4 * math.Pow(2, s-1) }

// tpSetting is the setting of tpKv giving kv.
func tpSetting(kv float64) float64 { return 1 + math.Log2(kv/4) }

// tpReadings returns the valve differentials a branch of fixed parts of
// Kv kvF times multiplier m shows at each valve Kv under differential d,
// read by test points whose flow factor is 1+b: from the square law,
// V = d·R_v/(m R_F + R_v), read (1+b)² V.
func tpReadings(kvF, m, b, d float64, kvs []float64, modelled bool) TestPointCase {
	rf := 1 / (kvF * kvF)
	c := TestPointCase{Fixed: kvDrop(kvF), Lo: 0.5, Hi: 4,
		ValveR: func(s float64) float64 { r, _ := kvDrop(tpKv(s))(1); return r }}
	for _, kv := range kvs {
		rv := 1 / (kv * kv)
		v := (1 + b) * (1 + b) * d * rv / (m*rf + rv)
		c.States = append(c.States, TestPointState{
			Setting: tpSetting(kv), Valve: v, ValveSD: 250 + 0.005*v, // ±(0.5 kPa + 1 %) at k = 2
			Branch: d, BranchSD: 250 + 0.005*d, Modelled: modelled,
		})
	}
	return c
}

// TestWeighTestPoints: a clean branch whose test points read the flow 25 %
// low and the same branch fouled to 2.215 times its design resistance,
// read right, give the same valve differential at one setting (solved by
// hand from the square law: m = ((R_F + R_v)/g - R_v)/R_F with g = 0.5625,
// R_F = 1/9, R_v = 1/16); the weighing must then give the two the same
// verdict, neither decided. Opened to twice the Kv, the fouled branch's
// valve takes 5.97 kPa of 100 and the other's test points read 6.94: the
// second setting must decide each the right way, with the multiplier and
// the error found. Test points reading 20 % high in a branch at design
// (which one setting shows as a branch passing far more than designed)
// are decided too, with the branch differential the model's instead of
// read. A valve seized at Kv 5 (recorded at settings 1 and 2, its table's
// Kv 4 and 8) takes the same share of the branch differential in both
// states, which neither the table nor an offset within the range gives:
// the seized explanation must take it, not the test points.
func TestWeighTestPoints(t *testing.T) {
	const d = 100e3
	mFouled := ((1.0/9+1.0/16)/0.5625 - 1.0/16) / (1.0 / 9)
	one := []float64{4}
	two := []float64{4, 8}
	fouled1, err := WeighTestPoints(tpReadings(3, mFouled, 0, d, one, false))
	if err != nil {
		t.Fatal(err)
	}
	off1, err := WeighTestPoints(tpReadings(3, 1, -0.25, d, one, false))
	if err != nil {
		t.Fatal(err)
	}
	if fouled1.Settings != 1 || math.Abs(fouled1.Weight-off1.Weight) > 1e-3 {
		t.Errorf("one setting: verdicts %+v and %+v, want the same", fouled1, off1)
	}
	if fouled1.Weight < 1-MeterDecides || fouled1.Weight > MeterDecides {
		t.Errorf("one setting: weight %.3f decided, want between %.3f and %.3f", fouled1.Weight, 1-MeterDecides, MeterDecides)
	}
	cases := []struct {
		name     string
		m, b     float64
		modelled bool
		kvs      []float64
		off      bool
	}{
		{"fouled, read right", mFouled, 0, false, two, false},
		{"clean, test points 25 % low", 1, -0.25, false, two, true},
		{"clean, test points 20 % high, branch differential modelled", 1, 0.2, true, two, true},
		{"fouled, read right, three settings modelled", mFouled, 0, true, []float64{3, 4, 8}, false},
	}
	t.Run("seized at Kv 5, read right", func(t *testing.T) {
		c := tpReadings(3, 1, 0, d, []float64{5, 5}, false)
		c.States[0].Setting, c.States[1].Setting = 1, 2
		v, err := WeighTestPoints(c)
		if err != nil {
			t.Fatal(err)
		}
		if v.Seized < MeterDecides || v.Weight > 1-MeterDecides {
			t.Errorf("verdict %+v: want seized >= %.3f, test points off <= %.3f", v, MeterDecides, 1-MeterDecides)
		}
	})
	t.Run("clean, test points 30 % high, read above the branch differential", func(t *testing.T) {
		// Fixed parts of Kv 12 behind the valve's 4 and 8: the valve
		// takes 90 % and 69 % of the branch differential, read 1.69
		// times, 1.52 and 1.17 times the branch's.
		c := tpReadings(12, 1, 0.3, d, two, false)
		if !(c.States[0].Valve > 1.5*d) {
			t.Fatalf("construction: valve differential %.0f Pa, want above 1.5 times the branch's", c.States[0].Valve)
		}
		v, err := WeighTestPoints(c)
		if err != nil {
			t.Fatal(err)
		}
		if v.Weight < MeterDecides || math.Abs(v.Off-0.3) > 0.03 {
			t.Errorf("verdict %+v: want weight >= %.3f, off 0.30", v, MeterDecides)
		}
	})
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			v, err := WeighTestPoints(tpReadings(3, tc.m, tc.b, d, tc.kvs, tc.modelled))
			if err != nil {
				t.Fatal(err)
			}
			if v.Settings != len(tc.kvs) {
				t.Errorf("settings %d, want %d", v.Settings, len(tc.kvs))
			}
			if tc.off {
				if v.Weight < MeterDecides || math.Abs(v.Off-tc.b) > 0.03 || math.Abs(math.Log(v.Ratio/tc.m)) > 0.1 {
					t.Errorf("verdict %+v: want weight >= %.3f, off %.2f, ratio %.2f", v, MeterDecides, tc.b, tc.m)
				}
				// The readings are exact: the ratio's spread comes from
				// the gauges' 1 %, widened because the ratio and the
				// error trade off along the readings at two settings;
				// it must cover the ratio's error and stay well inside
				// the one-setting prior's (ln 2).
				if !(v.RatioSD > 0) || v.RatioSD > 0.15 || math.Abs(math.Log(v.Ratio/tc.m)) > 2*v.RatioSD {
					t.Errorf("ratio %.3f, sd of its ln %.3f: want %.3f within two sd, the sd under 0.15", v.Ratio, v.RatioSD, tc.m)
				}
				t.Logf("ratio %.3f (true %.3f), sd of its ln %.3f, off %.3f", v.Ratio, tc.m, v.RatioSD, v.Off)
				return
			}
			if v.Weight > 1-MeterDecides || math.Abs(math.Log(v.RatioRight/tc.m)) > 0.05 {
				t.Errorf("verdict %+v: want weight <= %.3f, ratio if right %.3f", v, 1-MeterDecides, tc.m)
			}
		})
	}
	bad := tpReadings(3, 1, 0, d, two, false)
	bad.States[1].Valve = 2.5 * d // beyond what test points 40 % high give
	if _, err := WeighTestPoints(bad); err == nil {
		t.Error("a valve differential 2.5 times the branch's: no error")
	}
	if _, err := WeighTestPoints(TestPointCase{}); err == nil {
		t.Error("no states: no error")
	}
}

// BenchmarkWeighTestPoints weighs a branch read at one setting (the
// ranking's weights) and at two and three (a decision).
func BenchmarkWeighTestPoints(b *testing.B) {
	for _, kvs := range [][]float64{{4}, {4, 8}, {3, 4, 8}} {
		c := tpReadings(3, 1, -0.25, 100e3, kvs, true)
		b.Run(fmt.Sprintf("settings=%d", len(kvs)), func(b *testing.B) {
			for b.Loop() {
				if _, err := WeighTestPoints(c); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
