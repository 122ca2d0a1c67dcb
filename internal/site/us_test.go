package site

import (
	"strings"
	"testing"
	"testing/fstest"

	"github.com/google/go-cmp/cmp"
)

// TestRoundTripUS writes the fixture, with a controller and two pumps, in US
// customary units and reads it back: the same site to rounding, every
// header naming a US unit or the Cv column, readings in gpm and psi. The
// factors are the units package's (gpm = 0.003785411784/60 m3/s exactly,
// NIST SP 811 appendix B); the Cv columns take Kv = 0.864978 Cv.
func TestRoundTripUS(t *testing.T) {
	want := readSmall(t)
	want.Branch("R2").Controller = Controller{SetPoint: 25e3, Kvs: 16, Min: 5e3, Max: 50e3}
	var pts []PumpPoint
	for _, id := range []string{"P1", "P2"} {
		for _, pt := range want.Pump {
			pt.Pump, pt.Speed, pt.Efficiency = id, nan, nan
			pts = append(pts, pt)
		}
	}
	want.Pump, want.PumpsRunning = pts, 1
	want.States[0].Running = 2
	fsys := fstest.MapFS{}
	if err := WriteDirIn(want, SheetsUS, mapCreate(fsys)); err != nil {
		t.Fatalf("WriteDirIn: %v", err)
	}
	got, p, err := ReadDir(fsys, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("ReadDir after WriteDirIn: %v\n%v", err, p)
	}
	if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
		t.Errorf("US round trip (-before +after):\n%s", diff)
	}
	heads := map[string][]string{
		"branches.csv": {"design flow [gpm]", "pipe length [ft]", "terminal drop [psi]", "controller set point [psi]", "controller cvs", "supply length [ft]"},
		"pump.csv":     {"flow [gpm]", "head [ft]"},
		"site.csv":     {"temperature [degF]"},
	}
	for name, hs := range heads {
		f, ok := fsys[name]
		if !ok {
			t.Fatalf("no %s written", name)
		}
		first, _, _ := strings.Cut(string(f.Data), "\n")
		if name == "site.csv" {
			first = string(f.Data)
		}
		for _, h := range hs {
			if !strings.Contains(first, h) {
				t.Errorf("%s does not name %q:\n%s", name, h, first)
			}
		}
		for _, si := range []string{"[l/s]", "[kPa]", "[m]", "[mm]", "[degC]", "controller kvs"} {
			if strings.Contains(first, si) {
				t.Errorf("%s still writes %s:\n%s", name, si, first)
			}
		}
	}
	rd := string(fsys["readings.csv"].Data)
	if strings.Contains(rd, ",l/s,") || strings.Contains(rd, ",kPa,") || !strings.Contains(rd, ",gpm,") {
		t.Errorf("readings not in gpm and psi:\n%s", rd)
	}
}
