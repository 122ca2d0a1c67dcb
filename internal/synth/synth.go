// Package synth makes synthetic sites with hidden "true" faults and simulated
// surveys of them, for the calibration, balancing and end-to-end tests and
// benchmarks. It is never used on a real site: its sites are plausible
// designs drawn at random from a seed, and its readings come from solving the
// true plant (the design with the hidden faults) with plant.Solve and adding
// Gaussian noise at each instrument's stated uncertainty.
//
// It also holds the hand-written descriptions of the example sites shipped in
// surveys/ (Demo, Plantroom, Ward, Wing), so those files never drift from their generator.
//
// # Faults
//
// A fouled branch has its fixed resistance raised (a blocked strainer, a
// scaled coil), a free one lowered (a bypass left open, a terminal smaller
// than scheduled). A mis-set valve is not where its handwheel says: its scale
// is offset, so when the technician moves it by some turns it moves by the
// same turns from its true position (Truth.ActualSetting). A stuck valve holds
// one setting whatever the handwheel shows (Truth.Stuck).
package synth

import (
	"context"
	"errors"
	"fmt"
	"math"

	"flowset/internal/plant"
	"flowset/internal/site"
)

// ErrSpec is wrapped by errors about a Spec that cannot be generated.
var ErrSpec = errors.New("invalid synthetic site spec")

// Fault names used in Truth.Faults.
const (
	Fouled = "fouled"
	Free   = "free"
	MisSet = "mis-set"
	Stuck  = "stuck"
	// OffSetPoint names a differential controller that holds another set
	// point than the one recorded (Truth.Params.SetPoint holds the ratio).
	OffSetPoint = "off-set-point"
)

// Spec describes a synthetic site to generate.
type Spec struct {
	// Branches is the number of rows of the branches sheet, risers and
	// their sub-branches included.
	Branches    int
	Arrangement site.Arrangement
	// Nested makes about one in four entries on the main headers a riser
	// with 3-6 sub-branches (counted in Branches).
	Nested bool
	// RiserTerminals, when above 0, lays the site out as a building's
	// risers instead: every main take-off a riser of about this many
	// terminals (within 20 %), the terminals radiators, fan coils and a few
	// air-handler coils (see Generate). Nested is then ignored.
	RiserTerminals int
	Boundary       site.BoundaryKind
	Seed           int64

	// Fouled, Free, MisSet and Stuck are the fractions of the terminal
	// (non-riser) branches given each hidden fault; their sum must not
	// exceed 1.
	Fouled, Free, MisSet, Stuck float64
	// Held is the fraction of the terminal branches given a
	// pressure-independent valve (the smallest of an invented family whose
	// largest flow is at least 1.25 times design) instead of a handwheel
	// valve. Mislimited is the fraction of those (drawn after the other
	// faults, among the branches still without one) whose limiter passes
	// 0.70-0.85 or 1.15-1.30 times its table's flow at FaultSeverity 1, in
	// Truth.Params.KvScale; a MisSet fault drawn on such a branch is the
	// same.
	Held, Mislimited float64
	// FaultSeverity scales the faults; 0 means 1, which makes a fouled
	// branch's resistance 2-4 times design, a free one's 0.3-0.5 times,
	// and puts a mis-set valve 30-50 % of its range away from its mark.
	FaultSeverity float64
	// Noise scales the instruments' stated uncertainties: 1 = as stated,
	// 0 = noise-free readings.
	Noise float64
	// States is the number of survey states (0 means 1). Each state after
	// the first moves every read mis-set or stuck valve and about a fifth of
	// the other read valves, starting from the settings of the state before.
	States int
	// Readings says what is read; the zero value means DefaultMix.
	Readings ReadingMix

	// Fluid is "water" (the default for ""), "ethylene-glycol" or
	// "propylene-glycol" at GlycolPercent by volume; Temperature is in K,
	// 0 means 70 degC for water and 10 degC for a glycol.
	Fluid         string
	GlycolPercent float64
	Temperature   float64
	// Header and PumpHead are the true header and pump-head multipliers
	// (plant.Params); 0 means 1.
	Header, PumpHead float64
}

// ReadingMix says which readings a simulated survey takes. The fractions
// choose that share of the branches at random (the same branches in every
// state); the flags take one reading per state.
type ReadingMix struct {
	ClampOn    float64 // flow by ultrasonic clamp-on meter
	ValveMeter float64 // flow by a valve meter at the valve's tappings, from the valve's Kv table
	ValveDiff  float64 // valve differential by manometer
	BranchDiff float64 // branch differential by manometer

	HeaderDiff bool // header differential by manometer
	PumpDiff   bool // pump differential by manometer
	TotalFlow  bool // pump flow by clamp-on meter

	// Paired reads every branch's flow once: by valve meter at the
	// ValveMeter share, by clamp-on meter at the others (ClampOn is then
	// ignored), and the valve differential by manometer at every
	// valve-metered branch (ValveDiff is then ignored).
	Paired bool
}

// DefaultMix is the reading mix of a thorough survey: half the branches by
// clamp-on meter, half by valve meter, half with their valve differential,
// a fifth with their branch differential, and the header and pump
// differentials and the total flow.
func DefaultMix() ReadingMix {
	return ReadingMix{ClampOn: 0.5, ValveMeter: 0.5, ValveDiff: 0.5, BranchDiff: 0.2,
		HeaderDiff: true, PumpDiff: true, TotalFlow: true}
}

// SurveyMix is the reading mix of a large building's survey: 70 % of the
// branches read by valve meter (with the valve differential at the same
// tappings), the other 30 % by clamp-on meter, half with their branch
// differential, and the header and pump differentials and the total flow.
func SurveyMix() ReadingMix {
	return ReadingMix{ValveMeter: 0.7, BranchDiff: 0.5, HeaderDiff: true, PumpDiff: true, TotalFlow: true, Paired: true}
}

// Truth is what a synthetic site really is, hidden from the sheets.
type Truth struct {
	// Params are the true multipliers (KvScale stays 1: a valve's fault is
	// its position, below).
	Params plant.Params
	// ActualSetting is, per branch, NaN where the valve sits at its
	// recorded setting, else where it really sat when found: the handwheel
	// scale is offset by ActualSetting - recorded, and every setting the
	// technician makes lands that far from the mark (within the valve's
	// range).
	ActualSetting []float64
	// Stuck is, per branch, NaN or the one setting a seized valve holds in
	// every state.
	Stuck []float64
	// Faults names each branch's fault: "", Fouled, Free, MisSet or Stuck.
	Faults []string
	// Differential is the differential, Pa, a constant- or
	// measured-differential boundary really holds; 0 with a pump curve.
	Differential float64
}

func (t *Truth) check(n int) error {
	if t == nil {
		return fmt.Errorf("no truth: %w", ErrSpec)
	}
	if len(t.Params.Resistance) != n || len(t.Params.KvScale) != n || len(t.ActualSetting) != n || len(t.Stuck) != n {
		return fmt.Errorf("truth has %d resistances, %d kv scales, %d actual and %d stuck settings for %d branches: %w",
			len(t.Params.Resistance), len(t.Params.KvScale), len(t.ActualSetting), len(t.Stuck), n, ErrSpec)
	}
	return nil
}

// Simulate solves the true plant of s when the technician sets the valves to
// settings (per branch, in each valve's units; NaN leaves a valve at its
// recorded as-found setting): mis-set valves land offset from the mark and
// stuck ones stay put. Balancing tests apply a plan to the truth with it.
func Simulate(ctx context.Context, s *site.Site, t *Truth, settings []float64) (*plant.Solved, error) {
	m, err := model(s)
	if err != nil {
		return nil, err
	}
	return simulate(ctx, m, t, settings)
}

// model builds the plant of s without its readings, so the survey's states
// (and a measured-differential boundary's readings) play no part.
func model(s *site.Site) (*plant.Model, error) {
	if s == nil {
		return nil, fmt.Errorf("no site: %w", ErrSpec)
	}
	cs := *s
	cs.Readings = nil
	return plant.New(&cs)
}

// SimulateState solves the true plant of s in a state of its model: st's
// settings as Simulate takes them, its speed, pumps running and planned
// controller set points where given (0 or nil: the site's). A plan that
// also sets the pump and the controllers is applied to the truth with it.
func SimulateState(ctx context.Context, s *site.Site, t *Truth, st plant.State) (*plant.Solved, error) {
	m, err := model(s)
	if err != nil {
		return nil, err
	}
	base := m.BaseState()
	if st.Speed > 0 {
		base.Speed = st.Speed
	}
	if st.Running > 0 {
		base.Running = st.Running
	}
	base.SetPoints = st.SetPoints
	return simulateIn(ctx, m, t, base, st.Settings)
}

func simulate(ctx context.Context, m *plant.Model, t *Truth, settings []float64) (*plant.Solved, error) {
	return simulateIn(ctx, m, t, m.BaseState(), settings)
}

// simulateIn solves the true plant of m in state st (its pump and
// controllers) with the valves set to settings.
func simulateIn(ctx context.Context, m *plant.Model, t *Truth, st plant.State, settings []float64) (*plant.Solved, error) {
	n := len(m.Branches)
	if err := t.check(n); err != nil {
		return nil, err
	}
	if len(settings) != n {
		return nil, fmt.Errorf("%d settings for %d branches: %w", len(settings), n, ErrSpec)
	}
	st.Label = "truth"
	st.Settings = Actual(m, t, settings)
	if m.Site.Boundary.Kind != site.PumpCurve {
		st.Differential = t.Differential
	}
	return m.Solve(ctx, t.Params, st)
}

// Actual returns where the valves of model m really sit when the technician
// sets them to settings (NaN: the recorded as-found setting).
func Actual(m *plant.Model, t *Truth, settings []float64) []float64 {
	out := make([]float64, len(m.Branches))
	for i := range m.Branches {
		b := &m.Branches[i]
		out[i] = math.NaN()
		if !b.HasValve() {
			continue
		}
		set := settings[i]
		if math.IsNaN(set) {
			set = b.AsFound
		}
		switch {
		case i < len(t.Stuck) && !math.IsNaN(t.Stuck[i]):
			set = t.Stuck[i]
		case i < len(t.ActualSetting) && !math.IsNaN(t.ActualSetting[i]):
			lo, hi := b.Range()
			set = math.Min(hi, math.Max(lo, set+t.ActualSetting[i]-b.AsFound))
		}
		out[i] = set
	}
	return out
}
