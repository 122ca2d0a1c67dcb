package synth

import (
	"bytes"
	"context"
	"errors"
	"io"
	"math"
	"strings"
	"testing"
	"testing/fstest"
	"time"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// specs are the generator's shapes exercised by the tests.
func specs() map[string]Spec {
	faults := func(s Spec) Spec {
		s.Fouled, s.Free, s.MisSet, s.Stuck = 0.1, 0.1, 0.1, 0.1
		return s
	}
	return map[string]Spec{
		"direct pump":             faults(Spec{Branches: 12, Arrangement: site.DirectReturn, Boundary: site.PumpCurve, Seed: 1, Noise: 1, States: 2}),
		"reverse constant nested": faults(Spec{Branches: 30, Arrangement: site.ReverseReturn, Nested: true, Boundary: site.ConstantDiff, Seed: 2, Noise: 1, States: 3}),
		"none measured":           faults(Spec{Branches: 8, Arrangement: site.NoHeaderLoss, Boundary: site.MeasuredDiff, Seed: 3, Noise: 1}),
		"glycol nested direct": faults(Spec{Branches: 40, Arrangement: site.DirectReturn, Nested: true, Boundary: site.PumpCurve, Seed: 4,
			Noise: 1, States: 2, Fluid: "propylene-glycol", GlycolPercent: 30, Header: 1.2, PumpHead: 0.95}),
		"one branch": {Branches: 1, Arrangement: site.DirectReturn, Seed: 5},
	}
}

func generate(t *testing.T, spec Spec) (*site.Site, *Truth) {
	t.Helper()
	s, tr, err := Generate(context.Background(), spec)
	if err != nil {
		t.Fatalf("Generate(%+v): %v", spec, err)
	}
	return s, tr
}

// TestReproducible checks that a seed gives the same site and truth and
// another seed a different one.
func TestReproducible(t *testing.T) {
	for name, spec := range specs() {
		t.Run(name, func(t *testing.T) {
			s1, t1 := generate(t, spec)
			s2, t2 := generate(t, spec)
			opt := cmpopts.EquateNaNs()
			if d := cmp.Diff(s1, s2, opt); d != "" {
				t.Errorf("Generate twice with seed %d: sites differ (-first +second):\n%s", spec.Seed, d)
			}
			if d := cmp.Diff(t1, t2, opt); d != "" {
				t.Errorf("Generate twice with seed %d: truths differ (-first +second):\n%s", spec.Seed, d)
			}
			spec.Seed += 100
			s3, _ := generate(t, spec)
			if cmp.Equal(s1, s3, opt) {
				t.Errorf("seeds %d and %d gave the same site", spec.Seed-100, spec.Seed)
			}
		})
	}
}

// expected returns the noise-free value of reading r on the true plant sol:
// the model's prediction, except for a valve-meter flow, which is the flow
// the valve's table gives at the recorded setting for the differential at
// the tappings (IEC 60534-2-1 Kv equation, as hydraulics.KvDrop).
func expected(t *testing.T, sol *plant.Solved, st plant.State, r *site.Reading) float64 {
	t.Helper()
	if r.Instrument != "valve-meter" {
		v, err := sol.Predict(r)
		if err != nil {
			t.Fatalf("Predict(%+v): %v", r, err)
		}
		return v
	}
	i, _ := sol.Model.Index(r.Where)
	kv, err := sol.Model.Branches[i].Valve.KvAt(st.Settings[i])
	if err != nil {
		t.Fatal(err)
	}
	dp1, _ := hydraulics.KvDrop(1, kv, sol.Model.Fluid.Density)
	return math.Sqrt(sol.ValveDiff(i) / dp1)
}

// TestNoiseFree checks that noise-free readings equal the plant's
// predictions with the true multipliers at the true valve positions, to
// 1e-9 relative (the readings are those predictions; the tolerance covers
// the order of floating-point sums only).
func TestNoiseFree(t *testing.T) {
	for name, spec := range specs() {
		t.Run(name, func(t *testing.T) {
			spec.Noise = 0
			s, tr := generate(t, spec)
			m, err := plant.New(s)
			if err != nil {
				t.Fatalf("plant.New: %v", err)
			}
			if len(s.Readings) == 0 {
				t.Fatal("no readings")
			}
			checked := 0
			for _, st := range m.States {
				sol, err := Simulate(context.Background(), s, tr, st.Settings)
				if err != nil {
					t.Fatalf("Simulate(%s): %v", st.Label, err)
				}
				for _, ri := range st.Readings {
					r := &s.Readings[ri]
					want := expected(t, sol, st, r)
					if math.Abs(r.Value-want) > 1e-9*math.Max(math.Abs(want), 1e-12) {
						t.Errorf("state %s: %v at %s by %s = %.12g, want %.12g", st.Label, r.What, r.Where, r.Instrument, r.Value, want)
					}
					checked++
				}
			}
			if checked != len(s.Readings) {
				t.Errorf("checked %d readings of %d", checked, len(s.Readings))
			}
		})
	}
}

// TestNoiseScale checks that the noise is about the stated uncertainty: the
// normalised errors of a large survey have a root-mean-square near 1 (for n
// standard normal draws it is within 1 ± 3/sqrt(2n) with near certainty;
// closed-form chi-square spread).
func TestNoiseScale(t *testing.T) {
	spec := Spec{Branches: 300, Arrangement: site.DirectReturn, Seed: 9, Noise: 1,
		Readings: ReadingMix{ClampOn: 1, ValveDiff: 1, BranchDiff: 1}}
	s, _ := generate(t, spec)
	spec.Noise = 0
	s0, _ := generate(t, spec)
	var sum float64
	n := 0
	for i, r := range s.Readings {
		z := (r.Value - s0.Readings[i].Value) / s0.Readings[i].Sigma
		sum += z * z
		n++
	}
	rms := math.Sqrt(sum / float64(n))
	if lim := 3 / math.Sqrt(2*float64(n)); math.Abs(rms-1) > lim {
		t.Errorf("RMS normalised noise over %d readings = %.3f, want 1 ± %.3f", n, rms, lim)
	}
}

// TestTruthFaults checks the hidden faults: counts by fraction, fouled and
// free multipliers in their ranges, mis-set valves away from the mark and
// stuck valves holding their as-found setting in every state.
func TestTruthFaults(t *testing.T) {
	spec := Spec{Branches: 200, Arrangement: site.DirectReturn, Nested: true, Seed: 7, Noise: 1, States: 2,
		Fouled: 0.1, Free: 0.05, MisSet: 0.1, Stuck: 0.05}
	s, tr := generate(t, spec)
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	leaves := 0
	count := map[string]int{}
	for i, b := range m.Branches {
		if !b.Riser() {
			leaves++
		}
		f := tr.Faults[i]
		count[f]++
		if f != "" && b.Riser() {
			t.Errorf("riser %s has fault %q, want faults on terminals only", b.ID, f)
		}
		r := tr.Params.Resistance[i]
		switch f {
		case Fouled:
			if r < 2 || r > 4 {
				t.Errorf("fouled %s resistance ×%g, want 2-4", b.ID, r)
			}
		case Free:
			if r < 0.3 || r > 0.5 {
				t.Errorf("free %s resistance ×%g, want 0.3-0.5", b.ID, r)
			}
		default:
			if r != 1 {
				t.Errorf("%s (%q) resistance ×%g, want 1", b.ID, f, r)
			}
		}
		if (f == MisSet) != !math.IsNaN(tr.ActualSetting[i]) {
			t.Errorf("%s (%q) actual setting %g", b.ID, f, tr.ActualSetting[i])
		}
		if f == MisSet && math.Abs(tr.ActualSetting[i]-b.AsFound) < 0.1-1e-9 {
			t.Errorf("mis-set %s at %g, recorded %g: not away from the mark", b.ID, tr.ActualSetting[i], b.AsFound)
		}
		if (f == Stuck) != !math.IsNaN(tr.Stuck[i]) {
			t.Errorf("%s (%q) stuck setting %g", b.ID, f, tr.Stuck[i])
		}
	}
	for f, frac := range map[string]float64{Fouled: 0.1, Free: 0.05, MisSet: 0.1, Stuck: 0.05} {
		if want := int(math.Round(frac * float64(leaves))); count[f] != want {
			t.Errorf("%d branches %s, want %d (%g of %d terminals)", count[f], f, want, frac, leaves)
		}
	}
	// Stuck valves hold; mis-set ones move by what the handwheel moved.
	second := m.States[1].Settings
	act := Actual(m, tr, second)
	moved := 0
	for i, b := range m.Branches {
		switch tr.Faults[i] {
		case Stuck:
			if act[i] != tr.Stuck[i] {
				t.Errorf("stuck %s at %g in state 2, want %g", b.ID, act[i], tr.Stuck[i])
			}
		case MisSet:
			lo, hi := b.Valve.Range()
			want := math.Min(hi, math.Max(lo, tr.ActualSetting[i]+second[i]-b.AsFound))
			if act[i] != want {
				t.Errorf("mis-set %s at %g in state 2, want %g", b.ID, act[i], want)
			}
		default:
			if b.Valve != nil && act[i] != second[i] {
				t.Errorf("%s at %g, handwheel %g", b.ID, act[i], second[i])
			}
		}
		if b.Valve != nil && second[i] != b.AsFound {
			moved++
		}
	}
	if moved == 0 {
		t.Error("no valve moved in state 2")
	}
}

// TestPlausible checks the design against the rules the generator claims:
// flows, velocities, terminal drops, monotone valve tables, and a pump that
// gives every branch at least 80 % of design with every valve open and no
// fault. The pump is sized 15 % over the index circuit's need at design, but
// with every valve open the near branches take more than design, the pump
// runs down its curve and a riser's wide-open siblings starve its index
// branch: 80 % is a plausibility bound, not an exact one (TestNeed is).
func TestPlausible(t *testing.T) {
	for name, spec := range specs() {
		t.Run(name, func(t *testing.T) {
			spec.Fouled, spec.Free, spec.MisSet, spec.Stuck, spec.Header, spec.PumpHead = 0, 0, 0, 0, 0, 0
			s, tr := generate(t, spec)
			m, err := plant.New(s)
			if err != nil {
				t.Fatal(err)
			}
			for i, b := range s.Branches {
				mb := &m.Branches[i]
				if !mb.Riser() {
					if q := b.DesignFlow * 1e3; q < 0.05-1e-9 || q > 3+1e-9 {
						t.Errorf("%s design flow %g l/s, want 0.05-3", b.ID, q)
					}
					if dp := b.TerminalDrop / 1e3; dp < 10 || dp > 40 {
						t.Errorf("%s terminal drop %g kPa, want 10-40", b.ID, dp)
					}
				}
				if v := velocity(b.DesignFlow, mb.Bore); v > maxHeaderVelocity+1e-9 {
					t.Errorf("%s pipe velocity %g m/s at design", b.ID, v)
				}
			}
			for _, v := range s.Valves {
				for k := 1; k < len(v.Kv); k++ {
					if v.Kv[k] <= v.Kv[k-1] {
						t.Errorf("valve %s Kv not increasing at setting %g", v.Name, v.Settings[k])
					}
				}
			}
			open := m.Open()
			st := m.BaseState()
			st.Settings = open
			if s.Boundary.Kind != site.PumpCurve {
				st.Differential = tr.Differential
			}
			sol, err := m.Solve(context.Background(), m.Design(), st)
			if err != nil {
				t.Fatal(err)
			}
			for i, b := range m.Branches {
				if r := sol.Flow(i) / b.Design; r < 0.8 {
					t.Errorf("%s gets %.2f of design with every valve open", b.ID, r)
				}
			}
		})
	}
}

// memFS collects the files WriteDir makes.
type memFS map[string]*bytes.Buffer

func (m memFS) create(name string) (io.WriteCloser, error) {
	b := &bytes.Buffer{}
	m[name] = b
	return nopCloser{b}, nil
}

type nopCloser struct{ io.Writer }

func (nopCloser) Close() error { return nil }

func (m memFS) mapFS(dir string) fstest.MapFS {
	out := fstest.MapFS{}
	for name, b := range m {
		out[dir+"/"+name] = &fstest.MapFile{Data: b.Bytes()}
	}
	return out
}

// TestSiteChecks writes generated sites as sheets and reads them back: the
// site package's own checks find no error, and the site read back builds
// the same model.
func TestSiteChecks(t *testing.T) {
	for name, spec := range specs() {
		t.Run(name, func(t *testing.T) {
			s, _ := generate(t, spec)
			files := memFS{}
			if err := site.WriteDir(s, files.create); err != nil {
				t.Fatalf("WriteDir: %v", err)
			}
			got, probs, err := site.ReadDir(files.mapFS("x"), "x")
			if err != nil {
				t.Fatalf("ReadDir: %v\n%v", err, probs)
			}
			for _, p := range probs {
				t.Logf("warning: %v", p)
			}
			if len(got.Branches) != len(s.Branches) || len(got.Readings) != len(s.Readings) {
				t.Errorf("read back %d branches and %d readings, want %d and %d", len(got.Branches), len(got.Readings), len(s.Branches), len(s.Readings))
			}
			if _, err := plant.New(got); err != nil {
				t.Errorf("plant.New of the site read back: %v", err)
			}
		})
	}
}

// TestSizes checks that sites of 10, 100 and 1000 branches generate
// quickly: within a generous 10 s all told on a shared two-core machine
// (they take a fraction of that; see BenchmarkGenerate).
func TestSizes(t *testing.T) {
	start := time.Now()
	for _, n := range []int{10, 100, 1000} {
		spec := Spec{Branches: n, Arrangement: site.DirectReturn, Nested: true, Seed: int64(n), Noise: 1, States: 2,
			Fouled: 0.05, MisSet: 0.05}
		s, _ := generate(t, spec)
		if len(s.Branches) != n {
			t.Errorf("Generate(%d branches) made %d", n, len(s.Branches))
		}
	}
	if d := time.Since(start); d > 10*time.Second {
		t.Errorf("generating 10, 100 and 1000 branches took %v", d)
	}
}

func TestSpecErrors(t *testing.T) {
	tests := []struct {
		name string
		spec Spec
		want string
	}{
		{"no branches", Spec{}, "0 branches"},
		{"faults over one", Spec{Branches: 5, Fouled: 0.6, Free: 0.6}, "add up to 1.2"},
		{"negative noise", Spec{Branches: 5, Noise: -1}, "noise scale -1"},
		{"unknown fluid", Spec{Branches: 5, Fluid: "brine"}, `fluid "brine"`},
		{"bad boundary", Spec{Branches: 5, Boundary: 7}, "unknown boundary"},
		{"too many states", Spec{Branches: 5, States: 11}, "11 states"},
		{"fraction above one", Spec{Branches: 5, Readings: ReadingMix{ClampOn: 2}}, "reading fraction 2"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := Generate(context.Background(), tc.spec)
			if !errors.Is(err, ErrSpec) || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("Generate(%+v) error = %v, want ErrSpec saying %q", tc.spec, err, tc.want)
			}
		})
	}
}

// TestSimulateErrors checks the argument checks of Simulate.
func TestSimulateErrors(t *testing.T) {
	s, tr := generate(t, Spec{Branches: 4, Arrangement: site.DirectReturn, Seed: 1})
	if _, err := Simulate(context.Background(), s, tr, []float64{1}); !errors.Is(err, ErrSpec) {
		t.Errorf("Simulate with 1 setting for 4 branches: error %v, want ErrSpec", err)
	}
	if _, err := Simulate(context.Background(), s, nil, make([]float64, 4)); !errors.Is(err, ErrSpec) {
		t.Errorf("Simulate without truth: error %v, want ErrSpec", err)
	}
}

// TestNeed checks the index-circuit differential in the one case with a
// closed-form answer: with no header loss every branch sees the source
// differential, so at exactly need() the index branch passes exactly its
// design flow with its valve open and every other branch at least its own
// (parallel circuits on ideal headers, the textbook case).
func TestNeed(t *testing.T) {
	for _, seed := range []int64{1, 2, 3} {
		s, _ := generate(t, Spec{Branches: 15, Arrangement: site.NoHeaderLoss, Boundary: site.ConstantDiff, Seed: seed})
		m, err := plant.New(s)
		if err != nil {
			t.Fatal(err)
		}
		st := m.BaseState()
		st.Settings, st.Differential = m.Open(), need(m)
		sol, err := m.Solve(context.Background(), m.Design(), st)
		if err != nil {
			t.Fatal(err)
		}
		lowest := math.Inf(1)
		for i, b := range m.Branches {
			lowest = math.Min(lowest, sol.Flow(i)/b.Design)
		}
		if math.Abs(lowest-1) > 1e-6 {
			t.Errorf("seed %d: lowest flow at the need differential %.9f of design, want 1 (±1e-6, the solver's tolerance)", seed, lowest)
		}
	}
}
