package balance

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

const m3h = 1.0 / 3600

// shortSite is parallelSite (ideal headers, square-law branches) with a
// fine handwheel (so rounding does not blur the checks), driven by a pump
// whose curve has no linear term, H = H0 - a Q² (m, m3/s), given by three
// points on it so the quadratic fit returns it exactly. Branch c's
// resistance multiplier is set by the caller.
func shortSite(h0, a float64, b site.Boundary) *site.Site {
	s := parallelSite()
	s.Valves[0].Step = 0.001
	s.Boundary = b
	q1, q2 := 2*m3h, 5*m3h
	s.Pump = []site.PumpPoint{{Flow: 0, Head: h0}, {Flow: q1, Head: h0 - a*q1*q1}, {Flow: q2, Head: h0 - a*q2*q2}}
	s.PumpEfficiency, s.MotorEfficiency, s.Hours = 0.6, 0.9, 2000
	return s
}

// openResistance returns b = Δp/Q² of parallelSite's branch with its valve
// fully open (Kvs 5), terminal multiplied by r: the terminal's rated drop
// over its flow squared plus the Kv law's 1/Kvs² (bar per (m3/h)², relative
// density applied; IEC 60534-2-1 short form), Pa s²/m⁶.
func openResistance(term, q, r, rel float64) float64 {
	return r*term/(q*q) + 1e5*rel/(5*5*m3h*m3h)
}

// designFirstFlow solves, by bisection, the design-first operating point of
// parallel branches on ideal headers fed by a pump D(Q) = ρg(H0 s² - a Q²):
// the branches that can reach their targets carry qo together, the starved
// one with open resistance b carries √(D/b), and D = ρg(H0 s² - a (qo +
// √(D/b))²). Written here, from the pump and system curves alone.
func designFirstFlow(rg, h0, a, s, qo, b float64) (d, q float64) {
	f := func(d float64) float64 {
		q := qo + math.Sqrt(d/b)
		return d - rg*(h0*s*s-a*q*q)
	}
	lo, hi := 0.0, rg*h0*s*s
	for range 200 {
		mid := (lo + hi) / 2
		if f(mid) < 0 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo, math.Sqrt(lo / b)
}

// TestDesignFirst plans parallel branches whose fouled branch c (three
// times its design resistance: 111 kPa at target against 40 kPa for the
// others) the pump cannot serve. Design first: c's valve is fully open, c is
// named in Unmet with a remedy that restores it, a and b get their targets
// (±2 %), and c's flow is the operating point of the pump against what is
// left (designFirstFlow). Proportional: every branch gets the same fraction
// of its target. Both for a pump boundary and for a controlled pump whose
// present set point (300 kPa) is above its curve.
func TestDesignFirst(t *testing.T) {
	const h0, a = 7.0, 1.1e6 // 68.7 kPa shut off, 60 kPa at 3.86 m3/h (invented)
	pumpB := site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan, Sensor: site.AtPump}
	ctrlB := site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1.05, SetPoint: 300e3, Sensor: site.AtPump}
	for _, c := range []struct {
		name string
		b    site.Boundary
	}{{"pump", pumpB}, {"controlled", ctrlB}} {
		for _, share := range []Share{DesignFirst, Proportional} {
			t.Run(fmt.Sprintf("%s/%v", c.name, share), func(t *testing.T) {
				ctx := context.Background()
				m := mustModel(t, shortSite(h0, a, c.b))
				p := m.Design()
				p.Resistance[2] = 3
				pl := mustCompute(t, m, p, &Options{Rounding: Smart, Share: share})
				rg := m.Fluid.Density * hydraulics.StandardGravity
				rel := m.Fluid.Density / hydraulics.KvRefDensity
				sMax := m.MaxSpeed()
				if !pl.Pump.Short {
					t.Fatalf("Pump.Short = false; needed %.1f kPa, available %.1f kPa", pl.Pump.Needed/1e3, pl.Pump.Available/1e3)
				}
				qt := (1 + 2.5 + 0.36) * m3h
				if want := rg * (h0*sMax*sMax - a*qt*qt); math.Abs(pl.Pump.Available/want-1) > 1e-9 {
					t.Errorf("Available = %.6g Pa, want the curve at maximum speed at the target flow %.6g", pl.Pump.Available, want)
				}
				if !strings.Contains(strings.Join(pl.Summary(), "\n"), fmt.Sprintf("(%.1f kPa short;", (pl.Pump.Needed-pl.Pump.Available)/1e3)) {
					t.Errorf("summary does not state the shortfall in kPa: %q", pl.Summary())
				}
				// The pump runs flat out: a pump boundary at its maximum
				// speed, a controlled one with the set point it can give.
				qp := pl.TotalFlow
				give := rg * (h0*sMax*sMax - a*qp*qp)
				if c.b.Kind == site.PumpCurve {
					if pl.Speed != sMax {
						t.Errorf("Speed = %g, want the maximum %g", pl.Speed, sMax)
					}
				} else {
					if math.Abs(pl.Differential/give-1) > 1e-9 {
						t.Errorf("set point %.6g Pa, want what the pump gives flat out at %.4g l/s: %.6g", pl.Differential, qp*1e3, give)
					}
					if pl.Pump.SpeedRatio != sMax {
						t.Errorf("drive speed %g, want its maximum %g", pl.Pump.SpeedRatio, sMax)
					}
				}
				// The plan's state re-solved on the plant model (the
				// controlled pump's own element) gives the plan's flows.
				sol, err := m.Solve(ctx, p, pl.State())
				if err != nil {
					t.Fatal(err)
				}
				for i, b := range pl.Branches {
					if got := sol.Flow(i); math.Abs(got/b.Predicted-1) > 2e-3 {
						t.Errorf("branch %s: %.6g m3/s re-solved, plan says %.6g", b.ID, got, b.Predicted)
					}
				}
				if share == Proportional {
					for _, b := range pl.Branches {
						if math.Abs(b.Percent-pl.Branches[0].Percent) > 0.5 || b.Percent > 90 {
							t.Errorf("branch %s at %.2f %% of target, branch a at %.2f %%: want equal fractions below the band", b.ID, b.Percent, pl.Branches[0].Percent)
						}
					}
					return
				}
				for _, b := range pl.Branches[:2] {
					if math.Abs(b.Percent-100) > 2 {
						t.Errorf("branch %s at %.2f %% of target, want within ±2 %% (design first)", b.ID, b.Percent)
					}
				}
				cb := pl.Branches[2]
				if cb.New != 4 {
					t.Errorf("starved branch c set to %g, want fully open (4)", cb.New)
				}
				var named bool
				for _, u := range pl.Unmet {
					if u.ID == "c" {
						named = strings.Contains(u.Remedy, "clear the restriction")
					} else {
						t.Errorf("branch %s named unmet", u.ID)
					}
				}
				if !named {
					t.Errorf("c not named unmet with its remedy: %+v", pl.Unmet)
				}
				if len(pl.Remedies) == 0 || pl.Remedies[0].ID != "c" || pl.Remedies[0].Kind != Restore || !pl.Remedies[0].Serves {
					t.Errorf("first remedy %+v, want restoring c, after which the pump serves every target", pl.Remedies)
				} else if r := pl.Remedies[0]; !(r.Saves > 0) || math.Abs(r.Power-qt*r.Saves/(0.6*0.9)) > 1e-9*r.Power || math.Abs(r.AnnualEnergy-r.Power*2) > 1e-9*r.AnnualEnergy {
					t.Errorf("remedy saves %g Pa, %g W, %g kWh: want Q·Δp/η and that times 2000 h", r.Saves, r.Power, r.AnnualEnergy)
				}
				// c's flow is the operating point of the pump against c's
				// open resistance with a and b at their predicted flows.
				qo := pl.Branches[0].Predicted + pl.Branches[1].Predicted
				d, qc := designFirstFlow(rg, h0, a, sMax, qo, openResistance(37e3, 0.36*m3h, 3, rel))
				if math.Abs(cb.Predicted/qc-1) > 1e-4 || math.Abs(pl.Required/d-1) > 1e-4 {
					t.Errorf("c gets %.6g m3/s at %.6g Pa, the curves cross at %.6g m3/s, %.6g Pa", cb.Predicted, pl.Required, qc, d)
				}
			})
		}
	}
}

// TestShortSingle checks the plan of one branch the pump cannot serve
// against the operating point of a pump H = H0 - a Q² on a system Δp = b Q²:
// Q = √(H0/(a + b)) with both in head (the intersection of the pump and
// system curves; textbook, common practice).
func TestShortSingle(t *testing.T) {
	const h0, a = 3.0, 1.1e6
	s := shortSite(h0, a, site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan, Sensor: site.AtPump})
	s.Branches = s.Branches[1:2] // b: 2.5 m3/h, needs 40 kPa; the pump gives under 29
	m := mustModel(t, s)
	pl := mustCompute(t, m, m.Design(), nil)
	rg := m.Fluid.Density * hydraulics.StandardGravity
	b := openResistance(15e3, 2.5*m3h, 1, m.Fluid.Density/hydraulics.KvRefDensity) / rg
	want := math.Sqrt(h0 / (a + b))
	if got := pl.Branches[0].Predicted; math.Abs(got/want-1) > 1e-6 {
		t.Errorf("flow %.9g m3/s, want √(H0/(a+b)) = %.9g", got, want)
	}
	if !pl.Pump.Short || pl.Branches[0].New != 4 || len(pl.Unmet) != 1 || pl.Unmet[0].Remedy == "" {
		t.Errorf("short %v, setting %g, unmet %+v: want the valve fully open and the branch unmet with a remedy", pl.Pump.Short, pl.Branches[0].New, pl.Unmet)
	}
}

// TestControlledFeasible plans a controlled pump that can serve every
// target: the set point is the differential the plan needs, no more than
// the curve gives at maximum speed, and the drive's speed is the affinity
// speed at which the curve passes through the duty (hydraulics.SpeedFor:
// A0 s² + A1 q s + A2 q² = H). The as-found state holds the present set
// point where the pump can give it, and runs flat out where it cannot.
func TestControlledFeasible(t *testing.T) {
	const h0, a = 9.0, 1.1e6
	for _, sp := range []float64{60e3, 300e3} {
		t.Run(fmt.Sprintf("present=%.0fkPa", sp/1e3), func(t *testing.T) {
			m := mustModel(t, shortSite(h0, a, site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: sp, Sensor: site.AtPump}))
			pl := mustCompute(t, m, m.Design(), &Options{Rounding: Smart})
			rg := m.Fluid.Density * hydraulics.StandardGravity
			q := pl.TotalFlow
			if pl.Pump.Short || len(pl.Unmet) != 0 {
				t.Fatalf("short %v, unmet %+v: the pump can serve every target", pl.Pump.Short, pl.Unmet)
			}
			if give := rg * (h0 - a*q*q); !(pl.Differential <= give) {
				t.Errorf("set point %.6g Pa above the %.6g Pa the pump gives flat out", pl.Differential, give)
			}
			if math.Abs(pl.Differential/pl.Least-1) > 0.02 {
				t.Errorf("set point %.6g Pa, least %.6g: want within 2 %%", pl.Differential, pl.Least)
			}
			s := pl.Pump.SpeedRatio
			if h := pl.Differential / rg; !(s < 1) || math.Abs(h0*s*s-a*q*q-h) > 1e-9*h {
				t.Errorf("drive speed %.9g: curve gives %.9g m at %.6g m3/s, duty %.9g m", s, h0*s*s-a*q*q, q, h)
			}
			before := pl.Pump.Before
			if give := rg * (h0 - a*before.Flow*before.Flow); math.Abs(before.Differential-min(sp, give)) > 1e-6*sp {
				t.Errorf("as found: %.6g Pa at %.6g m3/s, want min(set point %.6g, curve %.6g)", before.Differential, before.Flow, sp, give)
			}
		})
	}
}

// TestRemediesExact checks each remedy's figures, worked out by lowering
// the chains through the branch (leastWith), against a whole exact re-plan
// with the remedy carried out (the multiplier back to 1, or the Kv scale
// doubled): the least differential for every target after it, and with
// every restoration together.
func TestRemediesExact(t *testing.T) {
	var checked int
	for seed := range uint64(12) {
		for _, arr := range []site.Arrangement{site.DirectReturn, site.ReverseReturn} {
			rng := rand.New(rand.NewPCG(seed, 5))
			s := randomSite(rng, genOpts{n: 8 + rng.IntN(30), header: arr, risers: true, noValve: true})
			m := withPump(t, s)
			p := randomParams(rng, m)
			for i := range p.Resistance {
				if rng.Float64() < 0.15 {
					p.Resistance[i] *= 2 + 2*rng.Float64() // fouled
				}
			}
			pl := mustCompute(t, m, p, &Options{Rounding: Smart})
			q := make([]float64, len(m.Branches))
			least := func(p plant.Params) float64 {
				for i, b := range m.Branches {
					q[i] = b.Target
				}
				e, err := newExact(m, p, q)
				if err != nil {
					t.Fatal(err)
				}
				return e.least
			}
			all := p.Clone()
			var nRestore int
			for _, r := range pl.Remedies {
				i, ok := m.Index(r.ID)
				if r.Kind == LargerPump {
					continue
				}
				if !ok {
					t.Fatalf("remedy for unknown branch %q", r.ID)
				}
				pr := p.Clone()
				switch r.Kind {
				case Restore:
					pr.Resistance[i] = 1
					all.Resistance[i] = 1
					nRestore++
				case LargerValve:
					pr.KvScale[i] *= 2
				}
				if want := least(pr); math.Abs(r.LeastAfter-want) > 1e-9*want {
					t.Errorf("seed %d %v: %v %s: least after %.9g Pa, re-plan %.9g", seed, arr, r.Kind, r.ID, r.LeastAfter, want)
				}
				checked++
			}
			if nRestore >= 2 {
				if want := least(all); math.Abs(pl.LeastRemedied-want) > 1e-9*want {
					t.Errorf("seed %d %v: least with every restoration %.9g Pa, re-plan %.9g", seed, arr, pl.LeastRemedied, want)
				}
			}
		}
	}
	if checked < 10 {
		t.Errorf("only %d remedies checked", checked)
	}
}

// TestNeverAboveMax plans random plants, with risers, on a pump boundary and
// on a controlled pump, the pump's head multiplier from a third to twice the
// one that just serves them: the plan never asks more than the pump gives at
// its maximum speed (a pump boundary's speed at most MaxSpeed; a controlled
// pump's set point at most its curve there at the planned flow), it is short
// exactly when the least differential exceeds what the pump gives at the
// total target flow, and every branch not named unmet is inside the band or
// off it only by rounding (a warning says so).
func TestNeverAboveMax(t *testing.T) {
	ctx := context.Background()
	for seed := range uint64(6) {
		for _, kind := range []site.BoundaryKind{site.PumpCurve, site.ConstantDiff} {
			for _, head := range []float64{0.3, 0.7, 1, 2} {
				t.Run(fmt.Sprintf("seed=%d/%v/head=%g", seed, kind, head), func(t *testing.T) {
					rng := rand.New(rand.NewPCG(seed, 9))
					s := randomSite(rng, genOpts{n: 6 + rng.IntN(25), header: []site.Arrangement{site.DirectReturn, site.ReverseReturn}[seed%2], risers: true, noValve: true})
					m := withPump(t, s)
					if kind == site.ConstantDiff {
						s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1.1, SetPoint: 80e3, Sensor: site.AtPump}
						m = mustModel(t, s)
					}
					p := randomParams(rng, m)
					p.PumpHead = head
					pl := mustCompute(t, m, p, &Options{Rounding: Smart})
					rg := m.Fluid.Density * hydraulics.StandardGravity
					give := func(q float64) float64 { return m.ScaledPump(p.PumpHead).AtSpeed(m.MaxSpeed()).Head(q) * rg }
					if short := pl.Least > give(pl.TotalTarget())*(1+1e-9); short != pl.Pump.Short {
						t.Errorf("Short = %v; least %.6g Pa, the pump gives %.6g Pa at the target flow", pl.Pump.Short, pl.Least, give(pl.TotalTarget()))
					}
					switch kind {
					case site.PumpCurve:
						if pl.Speed > m.MaxSpeed()*(1+1e-12) {
							t.Errorf("speed %.9g above the maximum %g", pl.Speed, m.MaxSpeed())
						}
					default:
						if g := give(pl.TotalFlow); pl.Differential > g*(1+1e-9) {
							t.Errorf("set point %.6g Pa above the %.6g Pa the pump gives flat out at %.6g m3/s", pl.Differential, g, pl.TotalFlow)
						}
						if pl.Pump.SpeedRatio > m.MaxSpeed()*(1+1e-12) {
							t.Errorf("drive speed %.9g above the maximum %g", pl.Pump.SpeedRatio, m.MaxSpeed())
						}
					}
					sol, err := m.Solve(ctx, p, pl.State())
					if err != nil {
						t.Fatal(err)
					}
					for _, b := range pl.Branches {
						k, _ := m.Index(b.ID)
						if got := sol.Flow(k); math.Abs(got/b.Predicted-1) > 2e-3 {
							t.Errorf("branch %s: %.6g m3/s re-solved on the plant model, plan says %.6g", b.ID, got, b.Predicted)
						}
					}
					t.Logf("short %v, %d unmet of %d", pl.Pump.Short, len(pl.Unmet), len(pl.Branches))
					unmet := map[string]bool{}
					for _, u := range pl.Unmet {
						unmet[u.ID] = true
					}
					var rounding bool
					for _, w := range pl.Warnings {
						rounding = rounding || strings.Contains(w, "handwheel rounding")
					}
					for _, b := range pl.Branches {
						if !b.InTolerance && !unmet[b.ID] && !rounding {
							t.Errorf("branch %s at %.1f %% of target, not named unmet and no rounding warning", b.ID, b.Percent)
						}
					}
				})
			}
		}
	}
}

// TestValveRemedies checks the remedies of branches a valve cannot set: a
// target so small that the fully throttled valve passes more (branch c at
// 0.05 m3/h needs Kv 0.05/√0.393 ≈ 0.08 from its table's lowest 0.5: the
// Kv law, IEC 60534-2-1 short form), and a branch without a valve with
// differential to spare (a, once its valve is taken away). Each is named
// unmet with the remedy that fits it, and the remedy saves nothing at the
// pump.
func TestValveRemedies(t *testing.T) {
	s := parallelSite()
	s.Branches[0].Valve, s.Branches[0].Setting = "", nan
	m := mustModel(t, s)
	pl := mustCompute(t, m, m.Design(), &Options{Targets: map[string]float64{"c": 0.05 * m3h}})
	want := map[string]RemedyKind{"a": FitValve, "c": SmallerValve}
	got := map[string]RemedyKind{}
	for _, r := range pl.Remedies {
		if r.Kind == LargerValve {
			continue // on the index b: its open valve takes 25 of 40 kPa
		}
		got[r.ID] = r.Kind
		if r.Saves != 0 {
			t.Errorf("remedy %v for %s saves %g Pa, want nothing at the pump", r.Kind, r.ID, r.Saves)
		}
	}
	for id, k := range want {
		if g, ok := got[id]; !ok || g != k {
			t.Errorf("branch %s: remedy %v (present %v), want %v", id, g, ok, k)
		}
	}
	words := map[string]string{"a": "fit one", "c": "fit a smaller valve"}
	var n int
	for _, u := range pl.Unmet {
		if w, ok := words[u.ID]; ok && strings.Contains(u.Remedy, w) {
			n++
		}
	}
	if n != 2 {
		t.Errorf("unmet %+v: want a and c, each with its remedy", pl.Unmet)
	}
}
