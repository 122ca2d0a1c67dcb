package calibrate

import (
	"fmt"
	"math"
	"strings"

	"flowset/internal/hydraulics"
	"flowset/internal/lsq"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// determinedFraction: a parameter is determined by the readings when its
// posterior sd is under this fraction of its prior sd (as in the engine).
const determinedFraction = 0.5

// calibration assembles the outcome of fit f.
func (su *setup) calibration(f *fitRun, verdicts []ValveVerdict) (*Calibration, error) {
	m, p, res := su.m, f.prob, f.res
	// Bring every state to the fitted point for the predictions.
	r := make([]float64, len(p.obs))
	before := p.solves
	if err := p.Residuals(res.X, r, nil); err != nil {
		return nil, fmt.Errorf("calibrate: evaluating the fit: %w", err)
	}
	exactHubVariances(p, res)
	su.solves += p.solves - before
	nb := len(m.Branches)
	c := &Calibration{
		Params: m.Design(), Branches: make([]BranchFit, nb), States: m.StateLabels(),
		Parameters: append([]Param(nil), p.params...), ChiSquare: res.ChiSquare, ReducedChiSquare: res.ReducedChiSquare,
		DOF: res.DOF, Iterations: res.Iterations, Status: res.Status, Converged: res.Status.OK(), Result: res,
		LogSD: make([]float64, nb), Solves: su.solves,
	}
	pps := make([]plant.Params, len(p.states)) // each state's multipliers at the fit
	for s := range p.states {
		pps[s] = p.stateParams(p.x, s, nil)
	}
	interval := func(j int) (ratio, lo, hi, sd float64) {
		ratio, lo, hi = lsq.Multiplier(res.X[j], res.Lo95[j], res.Hi95[j])
		return ratio, lo, hi, res.StdErr[j]
	}
	for i := range nb {
		b := &m.Branches[i]
		bf := BranchFit{ID: b.ID, Index: i, Ratio: 1, Lo: 1, Hi: 1, HasValve: b.Valve != nil, KvScale: 1, KvLo: 1, KvHi: 1, Valve: verdicts[i], FaultProb: math.NaN(), DataLn: math.NaN(), DataSD: math.NaN()}
		if su.faultProb != nil {
			bf.FaultProb, bf.DataLn, bf.DataSD = su.faultProb[i], su.dataLn[i], su.dataSD[i]
			if h := verdicts[i].Hypothesis; h == SetElsewhere || h == HoldsOneKv {
				// The data's view of the resistance was taken with the
				// valve on its table; the valve explains the branch now.
				bf.DataLn, bf.DataSD = math.NaN(), math.NaN()
			}
		}
		if j := p.rIdx[i]; j >= 0 {
			bf.Fitted, bf.Determined = true, res.Determined[j]
			bf.Ratio, bf.Lo, bf.Hi, bf.SD = interval(j)
			c.Params.Resistance[i] = bf.Ratio
			c.LogSD[i] = bf.SD
		}
		if j := p.kvIdx[i]; j >= 0 {
			bf.KvFitted, bf.KvDetermined = true, res.Determined[j]
			bf.KvScale, bf.KvLo, bf.KvHi, bf.KvSD = interval(j)
			switch p.params[j].Kind {
			case StuckParam:
				// One Kv in every state: give the scale that reproduces it
				// at the as-found setting.
				if kv, err := b.Valve.KvAt(b.AsFound); err == nil && kv > 0 {
					f := su.refKv[i] / kv
					bf.KvScale, bf.KvLo, bf.KvHi = bf.KvScale*f, bf.KvLo*f, bf.KvHi*f
				}
			case OffsetParam:
				// The scale the offset gives at the as-found setting, its
				// interval from the offset's and its sd to first order.
				bf.Valve.Offset, bf.Valve.OffsetSD = res.X[j], res.StdErr[j]
				lo, hi := b.Valve.Range()
				scale := func(d float64) (k, g float64) {
					at := b.AsFound + d
					kv, slope, err := kvSlope(b, min(max(at, lo), hi))
					kr, err2 := b.Valve.KvAt(b.AsFound)
					if err != nil || err2 != nil || !(kv > 0) || !(kr > 0) {
						return math.NaN(), math.NaN()
					}
					if at < lo || at > hi {
						slope = 0
					}
					return kv / kr, slope / kv
				}
				var g float64
				bf.KvScale, g = scale(res.X[j])
				bf.KvLo, _ = scale(res.Lo95[j])
				bf.KvHi, _ = scale(res.Hi95[j])
				bf.KvSD = math.Abs(g) * res.StdErr[j]
			}
			c.Params.KvScale[i] = bf.KvScale
			if b.Valve != nil {
				su.valveStates(p, i, &bf.Valve, pps)
			}
		}
		bf.ValveAssumed = b.Valve != nil && !bf.KvFitted
		c.Branches[i] = bf
	}
	for i, j := range p.spIdx {
		if j < 0 {
			continue
		}
		rec := m.Branches[i].Controller.SetPoint
		cf := ControllerFit{ID: m.Branches[i].ID, Index: i, Recorded: rec, Determined: res.Determined[j]}
		var ratio, lo, hi float64
		ratio, lo, hi, cf.LogSD = interval(j)
		cf.Held, cf.Lo, cf.Hi = rec*ratio, rec*lo, rec*hi
		if c.Params.SetPoint == nil {
			c.Params.SetPoint = make([]float64, nb)
			for k := range c.Params.SetPoint {
				c.Params.SetPoint[k] = 1
			}
		}
		c.Params.SetPoint[i] = ratio
		c.Controllers = append(c.Controllers, cf)
	}
	if su.mixSD != nil {
		// A branch kept under the clean prior reports the mixture's spread
		// (see classify), never less than its own fit's. Its readings
		// determine it when they could have seen a fault: its sd under the
		// faulty component alone is under half that component's prior sd.
		// One they do not determine keeps that wide sd, so that the plan
		// warns where an unseen fault could make it the index.
		for i := range c.Branches {
			b := &c.Branches[i]
			if !b.Fitted || su.rSigma[i] != su.opt.PriorClean {
				continue
			}
			b.Determined = su.slabSD[i] < determinedFraction*su.opt.PriorResistance
			sd := su.mixSD[i]
			if !b.Determined {
				// Wide enough that the band's upper end reaches the
				// faulty component's: what the branch may be if it is
				// faulty, which the readings cannot rule out.
				sd = max(su.slabSD[i], (su.slabMean[i]+2*su.slabSD[i]-math.Log(b.Ratio))/2)
			}
			if sd > b.SD {
				b.SD = sd
				b.Lo, b.Hi = b.Ratio*math.Exp(-res.TQuantile*sd), b.Ratio*math.Exp(res.TQuantile*sd)
				c.LogSD[i] = sd
			}
		}
	}
	su.heldStates(p, c, res.TQuantile)
	if p.hIdx >= 0 {
		c.Header.Fitted, c.Header.Determined = true, res.Determined[p.hIdx]
		c.Header.Ratio, c.Header.Lo, c.Header.Hi, c.Header.SD = interval(p.hIdx)
		c.Params.Header = c.Header.Ratio
	} else {
		c.Header = ParamFit{Ratio: 1, Lo: 1, Hi: 1}
	}
	if p.pIdx >= 0 {
		c.Pump.Fitted, c.Pump.Determined = true, res.Determined[p.pIdx]
		c.Pump.Ratio, c.Pump.Lo, c.Pump.Hi, c.Pump.SD = interval(p.pIdx)
		c.Params.PumpHead = c.Pump.Ratio
	} else {
		c.Pump = ParamFit{Ratio: 1, Lo: 1, Hi: 1}
	}
	out := make(map[int]bool, len(res.Outliers))
	for _, oi := range res.Outliers {
		out[oi] = true
	}

	at := make(map[int]int, len(f.sel)) // setup observation -> problem observation
	for oi, k := range f.sel {
		at[k] = oi
	}
	s := m.Site
	c.Readings = make([]ReadingFit, len(s.Readings))
	for ri := range s.Readings {
		rd := &s.Readings[ri]
		rf := ReadingFit{Index: ri, Pos: rd.Pos, State: rd.State, Where: rd.Where, What: rd.What, Value: rd.Value, Predicted: math.NaN(), Residual: math.NaN(), Normalised: math.NaN(), SameAs: su.twin[ri]}
		k := su.byReading[ri]
		meterC := 0.0
		if t := su.twin[ri]; t >= 0 {
			// Report the flow against its twin differential's fit.
			k = su.byReading[t]
			if b, ok := m.Index(rd.Where); ok {
				if kv, err := m.Branches[b].Valve.KvAt(m.States[su.state[ri]].Settings[b]); err == nil {
					meterC, _ = hydraulics.KvDrop(1, kv, su.rhoMeter)
				}
			}
		}
		switch {
		case su.boundary[ri]:
			rf.Boundary = true
			if st := su.state[ri]; st >= 0 {
				rf.Predicted = m.States[st].Differential
				if rd.What == site.HeaderDiff {
					// The state's differential is the pump's: an open
					// circuit's lift is not in the headers'.
					rf.Predicted -= m.Lift()
				}
				rf.Residual = rf.Predicted - rf.Value
				rf.Normalised = rf.Residual / rd.Sigma
			}
		case k >= 0:
			oi, ok := at[k]
			if !ok {
				break
			}
			o := &p.obs[oi]
			rf.Predicted = p.pred[oi]
			if meterC > 0 {
				rf.AsValveDiff = true
				rf.Predicted = math.Copysign(math.Sqrt(math.Abs(rf.Predicted)/meterC), rf.Predicted)
			} else if o.meter {
				rf.AsValveDiff = true
				rf.Predicted = math.Copysign(math.Sqrt(math.Abs(rf.Predicted)/o.meterC), rf.Predicted)
			}
			rf.Residual = rf.Predicted - rf.Value
			rf.Normalised = res.Residual[oi]
			if !rf.AsValveDiff {
				rf.Sigma, rf.ModelSD = o.sigma, o.modelSD
			}
			rf.Outlier = out[oi]
			rf.Doubted = su.doubted[k]
		}
		c.Readings[ri] = rf
	}
	explain(c.Readings)
	return c, nil
}

// heldStates fills each pressure-independent valve's state at the fit and,
// where it regulates in every survey state, puts its branch's resistance
// back to its prior: while the valve holds its flow the branch's flow and
// the differentials around it do not depend on that resistance (to the
// regulator's droop, hydraulics.RegulatorDroop: a doubled resistance of
// 20 kPa moves the flow by 0.1 %), so whatever the fit made of it is noise.
// Its interval is the faulty prior's (FitOptions.PriorResistance), as
// wide as a fault the readings cannot rule out: the plan then warns if
// such a branch could be the index.
func (su *setup) heldStates(p *problem, c *Calibration, tq float64) {
	m := su.m
	for i := range m.Branches {
		b := &m.Branches[i]
		if b.PI == nil {
			continue
		}
		bf := &c.Branches[i]
		bf.Held, bf.Regulates, bf.HasValve, bf.ValveAssumed = true, true, false, false
		for _, sn := range p.states {
			q := p.flow(sn, sn.flowOf[i])
			hs := HeldState{State: sn.st.Label, Flow: q, ValveDiff: math.NaN(), HoldDiff: math.NaN(), SetFlow: math.NaN()}
			if v, ok := sn.valve(m, i).(hydraulics.PressureIndependent); ok {
				hs.ValveDiff, _ = v.Drop(q, m.Fluid)
				hs.HoldDiff = max(b.PI.HoldDiff, v.HoldDiff(m.Fluid.Density))
				if t, err := b.PI.At(sn.st.Settings[i], 1); err == nil {
					hs.SetFlow = t.Flow
				}
			}
			hs.Starved = hs.ValveDiff < hs.HoldDiff
			if hs.Starved || math.IsNaN(hs.ValveDiff) {
				bf.Regulates = false
			}
			bf.HeldStates = append(bf.HeldStates, hs)
		}
		if !bf.Regulates || !bf.Fitted {
			continue
		}
		sd := su.opt.PriorResistance
		bf.Ratio, bf.SD, bf.Determined = 1, sd, false
		bf.Lo, bf.Hi = math.Exp(-tq*sd), math.Exp(tq*sd)
		bf.FaultProb, bf.DataLn, bf.DataSD = math.NaN(), math.NaN(), math.NaN()
		c.Params.Resistance[i] = 1
		c.LogSD[i] = sd
	}
}

// valveStates fills the verdict's per-state Kv, recorded and implied
// settings of branch i's valve at the fitted point of p.
func (su *setup) valveStates(p *problem, i int, v *ValveVerdict, pps []plant.Params) {
	b := &su.m.Branches[i]
	j := p.kvIdx[i]
	v.Kv = make([]float64, len(p.states))
	v.Recorded = make([]float64, len(p.states))
	v.Implied = make([]float64, len(p.states))
	lo, hi := b.Valve.Range()
	for s, sn := range p.states {
		set := sn.st.Settings[i]
		v.Recorded[s] = set
		v.Kv[s], v.Implied[s] = math.NaN(), math.NaN()
		kv, err := b.Valve.KvAt(set)
		if err != nil {
			continue
		}
		v.Kv[s] = kv * pps[s].KvScale[i]
		if p.params[j].Kind == OffsetParam {
			if at := set + p.x[j]; at >= lo && at <= hi {
				v.Implied[s] = at
			}
			continue
		}
		if h, err := b.Valve.SettingFor(v.Kv[s]); err == nil {
			v.Implied[s] = h
		}
	}
}

// String summarises a reading's fit in one line.
func (r ReadingFit) String() string {
	tag := ""
	switch {
	case r.Outlier:
		tag = " (outlier)"
	case r.Boundary:
		tag = " (boundary)"
	}
	at := fmt.Sprintf("%v at %s in state %q", r.What, r.Where, r.State)
	if r.Pos.File != "" {
		at = r.Pos.String() + ": " + at
	}
	return fmt.Sprintf("%s: read %.4g, model %.4g, %+.2f sd%s", at, r.Value, r.Predicted, r.Normalised, tag)
}

// suspectZ is the normalised residual beyond which explain says why a
// reading disagrees (the diagnosis's default for a suspect reading).
const suspectZ = 3

// explain fills Why for each reading set aside or beyond suspectZ: the
// value read against the model's, and which explanation the other readings
// of the same place and state point to. Two independent readings that agree
// with each other are rarely both wrong, so when the others at the branch
// miss the model the same way, the model around the branch is doubted
// before the reading; when they fit, the reading is.
func explain(rs []ReadingFit) {
	type key struct{ state, where string }
	at := map[key][]int{}
	for i, r := range rs {
		if r.Boundary || math.IsNaN(r.Normalised) {
			continue
		}
		k := key{r.State, r.Where}
		at[k] = append(at[k], i)
	}
	for i := range rs {
		r := &rs[i]
		if r.Boundary || math.IsNaN(r.Normalised) || !r.Outlier && math.Abs(r.Normalised) <= suspectZ {
			continue
		}
		head := fmt.Sprintf("read %s, the model needs %s (%+.1f standard uncertainties)", quantity(r.What, r.Value), quantity(r.What, r.Predicted), r.Normalised)
		if r.Doubted {
			r.Why = head + fmt.Sprintf("; the differentials at %s agree with each other and with its design without this flow, and two independent instruments that agree are rarely both wrong: the flow reading is doubted (a clamp-on meter set up with the wrong pipe size or wall, or a biased meter; about %+.0f %%)", r.Where, 100*(r.Value/r.Predicted-1))
			continue
		}
		var fit, miss []string
		for _, j := range at[key{r.State, r.Where}] {
			o := &rs[j]
			if j == i || o.SameAs == r.Index || r.SameAs == o.Index {
				continue
			}
			w := fmt.Sprintf("%s %s", o.What, signedTenths(o.Normalised))
			if math.Abs(o.Normalised) <= 2 {
				fit = append(fit, w)
			} else if o.Normalised*r.Normalised > 0 || o.What != r.What {
				miss = append(miss, w)
			}
		}
		switch {
		case len(fit) == 0 && len(miss) == 0:
			r.Why = head + "; nothing else reads " + r.Where + " in this state, so the reading cannot be checked against another: re-take it, or read the branch another way"
		case len(miss) > 0 && len(fit) == 0:
			r.Why = head + "; the other readings at " + r.Where + " (" + strings.Join(miss, ", ") + " standard uncertainties) miss the model too: they agree with each other, so the model around " + r.Where + " (its resistance, its valve, the header or the pump's boundary) is doubted before the reading"
		default:
			r.Why = head + "; the other readings at " + r.Where + " (" + strings.Join(fit, ", ") + " standard uncertainties) fit the model: this reading is doubted (misread, wrong unit or test points, or a meter set up for another valve)"
		}
	}
}

// quantity formats a value of q for a sentence: flows in l/s, a speed as a
// percentage, differentials in kPa.
func quantity(q site.Quantity, v float64) string {
	switch {
	case math.IsNaN(v):
		return "nothing"
	case q.IsFlow():
		return fmt.Sprintf("%.3g l/s", v*1000)
	case q == site.Speed:
		return fmt.Sprintf("%.1f %%", 100*v)
	}
	return fmt.Sprintf("%.3g kPa", v/1000)
}

// signedTenths writes v to one decimal with its sign, and a value that
// rounds to zero as 0.0, never -0.0.
func signedTenths(v float64) string {
	if math.Abs(v) < 0.05 {
		return "0.0"
	}
	return fmt.Sprintf("%+.1f", v)
}
