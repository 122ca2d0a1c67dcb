package hydraulics

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
)

func TestLookupPipeSch40(t *testing.T) {
	// ASME B36.10M Schedule 40, metric columns, references §4.1: bore =
	// OD - 2t in mm as tabulated in B36.10M.
	tests := []struct {
		size           string
		od, wall, bore float64 // mm
	}{
		{"DN15", 21.3, 2.77, 15.76},
		{"3/4", 26.7, 2.87, 20.96},
		{"1in", 33.4, 3.38, 26.64},
		{"1-1/4", 42.2, 3.56, 35.08},
		{"1 1/2", 48.3, 3.68, 40.94},
		{"2", 60.3, 3.91, 52.48},
		{"2-1/2", 73.0, 5.16, 62.68},
		{"NPS 3", 88.9, 5.49, 77.92},
		{"3.5", 101.6, 5.74, 90.12},
		{`4"`, 114.3, 6.02, 102.26},
		{"DN125", 141.3, 6.55, 128.20},
		{"150", 168.3, 7.11, 154.08},
		{"dn 200", 219.1, 8.18, 202.74},
		{"10", 273.0, 9.27, 254.46},
		{"12", 323.8, 10.31, 303.18},
	}
	for _, tc := range tests {
		t.Run(tc.size, func(t *testing.T) {
			p, err := LookupPipe("sch40", tc.size)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(p.OutsideDiameter*1e3-tc.od) > 1e-9 || math.Abs(p.Wall*1e3-tc.wall) > 1e-9 || math.Abs(p.Bore*1e3-tc.bore) > 1e-9 {
				t.Errorf("LookupPipe(sch40, %q) = OD %g wall %g bore %g mm; want %g %g %g", tc.size, p.OutsideDiameter*1e3, p.Wall*1e3, p.Bore*1e3, tc.od, tc.wall, tc.bore)
			}
			if p.Roughness != RoughnessSteel {
				t.Errorf("roughness = %g, want %g", p.Roughness, RoughnessSteel)
			}
		})
	}
}

func TestLookupPipeSch80(t *testing.T) {
	// ASME B36.10M Schedule 80: inch table (wall, ID) from public
	// reproductions of B36.10M; the metric wall and bore OD - 2t must agree
	// with the inch values to the rounding of the metric columns (OD to
	// 0.1 mm, so bore to 0.1 mm; wall to 0.01 mm).
	tests := []struct {
		size   string
		wallIn float64
		idIn   float64
	}{
		{"1/2", 0.147, 0.546},
		{"1", 0.179, 0.957},
		{"2", 0.218, 1.939},
		{"4", 0.337, 3.826},
		{"6", 0.432, 5.761},
		{"12", 0.688, 11.374},
	}
	for _, tc := range tests {
		p, err := LookupPipe("Sch 80", tc.size)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(p.Wall-tc.wallIn*0.0254) > 0.01e-3 || math.Abs(p.Bore-tc.idIn*0.0254) > 0.1e-3 {
			t.Errorf("sch80 %s: wall %.2f bore %.2f mm; want %.2f, %.2f", tc.size, p.Wall*1e3, p.Bore*1e3, tc.wallIn*25.4, tc.idIn*25.4)
		}
	}
}

func TestLookupPipeEN10255(t *testing.T) {
	// EN 10255 (BS 1387 walls), references §4.2: DN -> ID in mm.
	tests := []struct {
		std, size string
		bore      float64
	}{
		{"en10255-m", "DN15", 16.1}, {"en10255-m", "DN20", 21.7}, {"en10255-m", "DN25", 27.3},
		{"en10255-m", "DN32", 36.0}, {"en10255-m", "DN40", 41.9}, {"en10255-m", "DN50", 53.1},
		{"en10255-m", "DN65", 68.9}, {"en10255-m", "DN80", 80.9}, {"en10255-m", "DN100", 105.3},
		{"en10255-m", "DN125", 129.7}, {"en10255-m", "DN150", 155.1},
		{"en10255-h", "1/2", 14.9}, {"en10255-h", "3/4", 20.5}, {"en10255-h", "1", 25.7},
		{"en10255-h", "1-1/4", 34.4}, {"en10255-h", "1-1/2", 40.3}, {"en10255-h", "2", 51.3},
		{"en10255-h", "2-1/2", 67.1}, {"en10255-h", "3", 78.9}, {"en10255-h", "4", 103.5},
		{"en10255-h", "5", 128.9}, {"en10255-h", "6", 154.3},
	}
	for _, tc := range tests {
		p, err := LookupPipe(tc.std, tc.size)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(p.Bore*1e3-tc.bore) > 1e-9 {
			t.Errorf("LookupPipe(%s, %s).Bore = %.2f mm, want %.1f", tc.std, tc.size, p.Bore*1e3, tc.bore)
		}
	}
}

func TestLookupPipeTubes(t *testing.T) {
	// EN 1057 copper (makers' EN 1057 size lists: 15x1.0 has bore 13.0,
	// 22x1.0 20.0, 35x1.5 32.0 as printed in a maker's catalogue) and
	// EN 12201-2 PE100 SDR 11 (bore = OD - 2e).
	tests := []struct {
		std, size string
		want      PipeSize
	}{
		{"en1057", "15x1.0", PipeSize{Standard: "en1057", Nominal: "15x1.0", OutsideDiameter: 0.015, Wall: 0.001, Bore: 0.013, Roughness: RoughnessCopper}},
		{"en1057", "22 x 1", PipeSize{Standard: "en1057", Nominal: "22x1.0", OutsideDiameter: 0.022, Wall: 0.001, Bore: 0.020, Roughness: RoughnessCopper}},
		{"en1057", "35×1,5mm", PipeSize{Standard: "en1057", Nominal: "35x1.5", OutsideDiameter: 0.035, Wall: 0.0015, Bore: 0.032, Roughness: RoughnessCopper}},
		{"EN1057", "76.1", PipeSize{Standard: "en1057", Nominal: "76.1x1.5", OutsideDiameter: 0.0761, Wall: 0.0015, Bore: 0.0731, Roughness: RoughnessCopper}},
		{"pe100-sdr11", "63", PipeSize{Standard: "pe100-sdr11", Nominal: "63x5.8", OutsideDiameter: 0.063, Wall: 0.0058, Bore: 0.0514, Roughness: RoughnessPlastic}},
		{"pe100-sdr11", "110mm", PipeSize{Standard: "pe100-sdr11", Nominal: "110x10.0", OutsideDiameter: 0.110, Wall: 0.010, Bore: 0.090, Roughness: RoughnessPlastic}},
	}
	approx := cmp.Comparer(func(a, b float64) bool { return math.Abs(a-b) <= 1e-12 })
	for _, tc := range tests {
		t.Run(tc.std+" "+tc.size, func(t *testing.T) {
			got, err := LookupPipe(tc.std, tc.size)
			if err != nil {
				t.Fatal(err)
			}
			if diff := cmp.Diff(tc.want, got, approx); diff != "" {
				t.Errorf("LookupPipe(%q, %q) mismatch (-want +got):\n%s", tc.std, tc.size, diff)
			}
		})
	}
}

func TestLookupPipeErrors(t *testing.T) {
	tests := []struct {
		std, size string
		msg       string
	}{
		{"sch10", "2", "sch40, sch80"},
		{"sch40", "DN18", "DN15 (1/2in)"},
		{"sch40", "14", "not listed"},
		{"sch40", "1/0", "not a size"},
		{"sch40", "two", "not a size"},
		{"sch40", "1e1", "not a size"},
		{"en1057", "22", "several walls"},
		{"en1057", "23x1", "15x0.7"},
		{"pe100-sdr11", "x", "not OD x wall"},
		{"en10255-m", "DN300", "DN150 (6in)"},
		{"sch40", "", "not a size"},
	}
	for _, tc := range tests {
		t.Run(tc.std+" "+tc.size, func(t *testing.T) {
			p, err := LookupPipe(tc.std, tc.size)
			if !errors.Is(err, ErrUnknown) || !strings.Contains(err.Error(), tc.msg) {
				t.Errorf("LookupPipe(%q, %q) = %+v, %v; want ErrUnknown mentioning %q", tc.std, tc.size, p, err, tc.msg)
			}
		})
	}
}

func TestStandardsAndSizes(t *testing.T) {
	want := []string{"en10255-h", "en10255-m", "en1057", "pe100-sdr11", "sch40", "sch80"}
	if diff := cmp.Diff(want, Standards()); diff != "" {
		t.Errorf("Standards() mismatch (-want +got):\n%s", diff)
	}
	for _, std := range Standards() {
		sizes, err := Sizes(std)
		if err != nil || len(sizes) == 0 {
			t.Fatalf("Sizes(%s) = %d sizes, %v", std, len(sizes), err)
		}
		if _, err := StandardTitle(std); err != nil {
			t.Errorf("StandardTitle(%s): %v", std, err)
		}
		for i, s := range sizes {
			if !(s.Bore > 0) || math.Abs(s.Bore-(s.OutsideDiameter-2*s.Wall)) > 1e-15 || s.Standard != std {
				t.Errorf("%s %s: inconsistent %+v", std, s.Nominal, s)
			}
			if i > 0 && !(s.OutsideDiameter >= sizes[i-1].OutsideDiameter) {
				t.Errorf("%s: sizes not in order at %s", std, s.Nominal)
			}
			// Every listed nominal name looks itself up.
			back, err := LookupPipe(std, s.Nominal)
			if err != nil || back != s {
				t.Errorf("LookupPipe(%s, %s) = %+v, %v; want %+v", std, s.Nominal, back, err, s)
			}
			if err := s.Pipe(1).Validate(); err != nil {
				t.Errorf("%s %s: %v", std, s.Nominal, err)
			}
		}
	}
}

// TestStandardRoughness checks each standard's roughness against the
// material constants (sources beside them) and that names fold as
// LookupPipe folds them.
func TestStandardRoughness(t *testing.T) {
	for _, tc := range []struct {
		std  string
		want float64
	}{
		{"sch40", RoughnessSteel}, {"Schedule 80", RoughnessSteel}, {"EN10255_M", RoughnessSteel},
		{"en10255-h", RoughnessSteel}, {"EN 1057", RoughnessCopper}, {"pe100-sdr11", RoughnessPlastic},
	} {
		got, err := StandardRoughness(tc.std)
		if err != nil || got != tc.want {
			t.Errorf("StandardRoughness(%q) = %g, %v; want %g", tc.std, got, err, tc.want)
		}
	}
	if _, err := StandardRoughness("sch10"); !errors.Is(err, ErrUnknown) {
		t.Errorf("StandardRoughness(sch10) error = %v, want ErrUnknown", err)
	}
}

// refNormStandard is the name folding as first written, with a
// strings.Replacer: the oracle of FuzzNormStandard.
func refNormStandard(s string) string {
	s = strings.ToLower(strings.TrimSpace(s))
	s = strings.ReplaceAll(s, "schedule", "sch")
	return strings.NewReplacer(" ", "", "_", "-", ".", "").Replace(s)
}

func FuzzNormStandard(f *testing.F) {
	for _, s := range []string{"Sch 40", "SCH40", "schedule 40", " EN_10255-m ", "pe100.sdr11", "é_ .x", "sched ule", ""} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		if got, want := normStandard(s), refNormStandard(s); got != want {
			t.Errorf("normStandard(%q) = %q, want %q", s, got, want)
		}
	})
}

func FuzzLookupPipe(f *testing.F) {
	for _, s := range []string{"DN50", "2", "1-1/4", "1 1/4", `3/4"`, "22x1.0", "63", "1e3", "-1", "0/0", "x", ""} {
		f.Add("sch40", s)
		f.Add("en1057", s)
	}
	f.Fuzz(func(t *testing.T, std, size string) {
		p, err := LookupPipe(std, size)
		if err != nil {
			if !errors.Is(err, ErrUnknown) {
				t.Errorf("LookupPipe(%q, %q) error %v does not wrap ErrUnknown", std, size, err)
			}
			return
		}
		if !(p.Bore > 0) || !(p.Bore < p.OutsideDiameter) || p.Roughness <= 0 {
			t.Errorf("LookupPipe(%q, %q) = %+v: inconsistent size", std, size, p)
		}
	})
}

func ExampleLookupPipe() {
	p, err := LookupPipe("sch40", "1-1/4")
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%s %s: bore %.2f mm\n", p.Standard, p.Nominal, p.Bore*1e3)
	_, err = LookupPipe("en1057", "22")
	fmt.Println(err)
	// Output:
	// sch40 DN32: bore 35.08 mm
	// pipe catalogue: en1057 size "22" has several walls; write OD x wall (valid: 15x0.7, 15x1.0, 22x0.9, 22x1.0, 22x1.2, 28x0.9, 28x1.0, 28x1.2, 35x1.2, 35x1.5, 42x1.2, 42x1.5, 54x1.2, 54x2.0, 66.7x1.2, 76.1x1.5, 108x1.5, 133x1.5, 159x2.0)
}
