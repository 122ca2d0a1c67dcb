package synth

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
	"flowset/internal/units"
)

// take is one reading the technician takes in a state.
type take struct {
	Where      string // branch ID, site.AtPump or site.AtHeader
	What       site.Quantity
	Instrument string
	Time, Note string
}

// move is one valve the technician sets before a state's readings.
type move struct {
	ID      string
	Setting float64 // what the handwheel is set to
}

// stateDef is one survey state: the valves moved from the state before and
// the readings taken.
type stateDef struct {
	Label string
	Moves []move
	Takes []take
	// Running is how many pumps ran in the state; 0 = the site's. The
	// site's states sheet must say the same.
	Running int
}

// surveyOpts tunes how readings are made.
type surveyOpts struct {
	noise float64 // scale on the instruments' uncertainties
	// round shows readings as an instrument would (three significant
	// figures, the uncertainty to two), in values that print cleanly in
	// the sheets' units.
	round bool
	// us shows the rounded readings in gpm and psi instead of l/s and kPa,
	// for sheets written in US customary units.
	us bool
}

// survey simulates the readings of states on the true plant t of model m
// (built by model). Each
// valve whose setting differs from its as-found record carries its setting on
// every reading at its branch in that state, and must have one, so that the
// sheets say where the handwheel was; valve-meter readings always carry it.
func survey(ctx context.Context, m *plant.Model, t *Truth, states []stateDef, rng *rand.Rand, o surveyOpts) ([]site.Reading, error) {
	if err := t.check(len(m.Branches)); err != nil {
		return nil, err
	}
	asFound := m.AsFound()
	rec := append([]float64(nil), asFound...)
	var out []site.Reading
	for _, sd := range states {
		for _, mv := range sd.Moves {
			i, ok := m.Index(mv.ID)
			if !ok || !m.Branches[i].HasValve() {
				return nil, fmt.Errorf("state %q moves %q, which is no branch with a valve: %w", sd.Label, mv.ID, ErrSpec)
			}
			rec[i] = mv.Setting
		}
		read := make([]bool, len(m.Branches))
		for _, tk := range sd.Takes {
			if i, ok := m.Index(tk.Where); ok {
				read[i] = true
			}
		}
		for i := range rec {
			if rec[i] != asFound[i] && !math.IsNaN(rec[i]) && !read[i] {
				return nil, fmt.Errorf("state %q: valve of %q moved but not read, so the sheets cannot say where it is: %w",
					sd.Label, m.Branches[i].ID, ErrSpec)
			}
		}
		st := m.BaseState()
		if sd.Running > 0 {
			st.Running = sd.Running
		}
		sol, err := simulateIn(ctx, m, t, st, rec)
		if err != nil {
			return nil, fmt.Errorf("state %q: %w", sd.Label, err)
		}
		rs, err := readState(sol, sd, rec, asFound, rng, o)
		if err != nil {
			return nil, err
		}
		out = append(out, rs...)
	}
	return out, nil
}

func readState(sol *plant.Solved, sd stateDef, rec, asFound []float64, rng *rand.Rand, o surveyOpts) ([]site.Reading, error) {
	m := sol.Model
	manometer := instrument("manometer")
	tappings := map[int]float64{} // valve differential read at the tappings, shared by the meter and the manometer
	readTappings := func(i int) float64 {
		if dp, ok := tappings[i]; ok {
			return dp
		}
		dp := sol.ValveDiff(i)
		dp = math.Max(0, dp+o.noise*manometer.DefaultSigma(site.ValveDiff, dp)*rng.NormFloat64())
		tappings[i] = dp
		return dp
	}
	var out []site.Reading
	for _, tk := range sd.Takes {
		in := instrument(tk.Instrument)
		if in == nil {
			return nil, fmt.Errorf("state %q: unknown instrument %q: %w", sd.Label, tk.Instrument, ErrSpec)
		}
		r := site.Reading{State: sd.Label, Where: tk.Where, What: tk.What, Setting: math.NaN(), Instrument: tk.Instrument,
			Time: tk.Time, Note: tk.Note}
		i, isBranch := -1, false
		if tk.Where != site.AtPump && tk.Where != site.AtHeader {
			if i, isBranch = m.Index(tk.Where); !isBranch {
				return nil, fmt.Errorf("state %q: reading at unknown branch %q: %w", sd.Label, tk.Where, ErrSpec)
			}
		}
		var b *plant.Branch
		if isBranch {
			b = &m.Branches[i]
			if b.HasValve() && (rec[i] != asFound[i] || tk.Instrument == "valve-meter") {
				r.Setting = rec[i]
			}
		}
		var v float64
		switch {
		case tk.What == site.Flow && tk.Instrument == "valve-meter":
			if b == nil || b.ValveModel == nil || !b.ValveModel.Table() {
				return nil, fmt.Errorf("state %q: valve meter at %q, which has no valve with a Kv table: %w", sd.Label, tk.Where, ErrSpec)
			}
			// The meter turns the differential at the tappings into a flow
			// by the valve's table at the setting the handwheel shows:
			// a mis-set valve reads wrong.
			kv, err := b.Valve.KvAt(rec[i])
			if err != nil {
				return nil, fmt.Errorf("state %q: valve meter at %q: %w", sd.Label, tk.Where, err)
			}
			dp1, _ := hydraulics.KvDrop(1, kv, m.Fluid.Density)
			v = math.Sqrt(readTappings(i) / dp1)
		case tk.What == site.ValveDiff && tk.Instrument == "manometer":
			if b == nil || !b.HasValve() {
				return nil, fmt.Errorf("state %q: valve differential at %q, which has no valve: %w", sd.Label, tk.Where, ErrSpec)
			}
			v = readTappings(i)
		default:
			x, err := sol.Predict(&r)
			if err != nil {
				return nil, fmt.Errorf("state %q: %w", sd.Label, err)
			}
			v = math.Max(0, x+o.noise*in.DefaultSigma(tk.What, x)*rng.NormFloat64())
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("state %q: %v at %q is not finite: %w", sd.Label, tk.What, tk.Where, ErrSpec)
		}
		r.Value, r.Sigma = v, in.DefaultSigma(tk.What, v)
		if o.round {
			u := display(tk.What, o.us)
			r.Value = siFor(u, sigFigs(u.FromSI(v), 3))
			r.Sigma = siFor(u, sigFigs(u.FromSI(2*in.DefaultSigma(tk.What, r.Value)), 2)) / 2
		}
		out = append(out, r)
	}
	return out, nil
}

func instrument(name string) *site.Instrument {
	for _, in := range site.Instruments() {
		if in.Name == name {
			return &in
		}
	}
	return nil
}

// display is the unit the sheets write a reading in: l/s and kPa, or gpm
// and psi in US sheets.
func display(q site.Quantity, us bool) units.Unit {
	flow, pressure := "l/s", "kPa"
	if us {
		flow, pressure = "gpm", "psi"
	}
	if q.IsFlow() {
		u, _ := units.Lookup(units.Flow, flow)
		return u
	}
	u, _ := units.Lookup(units.Pressure, pressure)
	return u
}

// sigFigs rounds x to n significant figures. The division or multiplication
// by an exact power of ten gives the double nearest the decimal, which
// prints as that decimal.
func sigFigs(x float64, n int) float64 {
	if x == 0 || math.IsNaN(x) || math.IsInf(x, 0) {
		return x
	}
	p := n - 1 - int(math.Floor(math.Log10(math.Abs(x))))
	if p >= 0 {
		f := math.Pow(10, float64(p))
		return math.Round(x*f) / f
	}
	f := math.Pow(10, float64(-p))
	return math.Round(x/f) * f
}

// siFor returns an SI value that u.FromSI turns back into exactly x where
// one lies within a few ulps of u.ToSI(x), so the sheets print x as typed.
func siFor(u units.Unit, x float64) float64 {
	v := u.ToSI(x)
	if u.FromSI(v) == x {
		return v
	}
	up, down := v, v
	for range 8 {
		up, down = math.Nextafter(up, math.Inf(1)), math.Nextafter(down, math.Inf(-1))
		if u.FromSI(up) == x {
			return up
		}
		if u.FromSI(down) == x {
			return down
		}
	}
	return v
}
