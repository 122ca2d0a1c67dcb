package hydraulics

import (
	"errors"
	"fmt"
	"math"
	"testing"
)

func TestKvCvConstants(t *testing.T) {
	// [C] from the unit definitions of NIST SP 811 (references §3.3: Kv =
	// 0.864978 Cv, Cv = 1.156099 Kv).
	psi := 0.45359237 * 9.80665 / (0.0254 * 0.0254)
	want := 3.785411784e-3 * 60 * math.Sqrt(1e5/psi)
	if relErr(KvPerCv, want) > 1e-15 || relErr(CvPerKv, 1/want) > 1e-15 {
		t.Errorf("KvPerCv = %.16g, CvPerKv = %.16g; want %.16g, %.16g", KvPerCv, CvPerKv, want, 1/want)
	}
	if math.Abs(KvPerCv-0.864978) > 5e-7 || math.Abs(CvPerKv-1.156099) > 5e-7 {
		t.Errorf("KvPerCv = %g, CvPerKv = %g; references §3.3 0.864978, 1.156099", KvPerCv, CvPerKv)
	}
}

func TestKvFromDrop(t *testing.T) {
	// [C] checks of references §3.1 from the IEC 60534-2-1 equation with
	// ρ = ρ0 (relative density 1): Kv = Q/√Δp[bar].
	tests := []struct {
		name   string
		qm3h   float64
		dpKPa  float64
		wantKv float64
	}{
		{"1 m3/h at 10 kPa", 1, 10, 3.16228},
		{"2.5 m3/h at 25 kPa", 2.5, 25, 5.00000},
		{"0.36 m3/h at 3 kPa", 0.36, 3, 2.07846},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			q := tc.qm3h / 3600
			kv, err := KvFromDrop(q, tc.dpKPa*1e3, KvRefDensity)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(kv-tc.wantKv) > 5e-6 {
				t.Errorf("KvFromDrop = %.6f, want %.5f", kv, tc.wantKv)
			}
			// Round trip through KvDrop.
			dp, _ := KvDrop(q, kv, KvRefDensity)
			if relErr(dp, tc.dpKPa*1e3) > 1e-14 {
				t.Errorf("KvDrop(KvFromDrop) = %g, want %g", dp, tc.dpKPa*1e3)
			}
		})
	}
}

func TestKvDropDensity(t *testing.T) {
	// IEC 60534-2-1: at a fixed flow the drop scales with ρ/ρ0; definition
	// of Kv: 1 m3/h through Kv 1 at relative density 1 gives 1 bar.
	if dp, _ := KvDrop(1.0/3600, 1, KvRefDensity); relErr(dp, 1e5) > 1e-14 {
		t.Errorf("KvDrop(1 m3/h, Kv 1) = %g, want 1e5 Pa", dp)
	}
	d1, _ := KvDrop(1e-3, 3, KvRefDensity)
	d2, _ := KvDrop(1e-3, 3, 1.1*KvRefDensity)
	if relErr(d2/d1, 1.1) > 1e-14 {
		t.Errorf("drop ratio for 10 %% denser liquid = %g, want 1.1", d2/d1)
	}
}

func TestKvFromDropErrors(t *testing.T) {
	tests := []struct {
		name       string
		q, dp, rho float64
		want       error
	}{
		{"zero flow", 0, 1e4, 998, ErrOutOfRange},
		{"zero drop", 1e-3, 0, 998, ErrOutOfRange},
		{"opposite signs", 1e-3, -1e4, 998, ErrOutOfRange},
		{"zero density", 1e-3, 1e4, 0, ErrInvalid},
		{"NaN flow", math.NaN(), 1e4, 998, ErrInvalid},
		{"infinite drop", 1e-3, math.Inf(1), 998, ErrInvalid},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			kv, err := KvFromDrop(tc.q, tc.dp, tc.rho)
			if !errors.Is(err, tc.want) {
				t.Errorf("KvFromDrop(%g, %g, %g) = %g, %v; want %v", tc.q, tc.dp, tc.rho, kv, err, tc.want)
			}
		})
	}
	// Reversed flow with a reversed drop is fine.
	if kv, err := KvFromDrop(-1.0/3600, -1e4, KvRefDensity); err != nil || math.Abs(kv-3.16228) > 5e-6 {
		t.Errorf("KvFromDrop(reversed) = %g, %v; want 3.16228", kv, err)
	}
}

func ExampleKvFromDrop() {
	// A balancing valve passing 1.2 m3/h of water at 15 °C with 12 kPa
	// across it.
	kv, err := KvFromDrop(1.2/3600, 12e3, KvRefDensity)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("Kv = %.3f m3/h, Cv = %.3f gpm\n", kv, kv*CvPerKv)
	// Output:
	// Kv = 3.464 m3/h, Cv = 4.005 gpm
}
