package balance

import (
	"math"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
)

// bypasses sets each three-port terminal's bypass valve so that full bypass
// passes the same flow as full coil flow (common practice, no source): with
// the three-port valve to bypass the branch keeps its parts but the
// terminal, and the bypass valve adds its own drop, so at the branch's
// target flow the bypass valve must drop what the terminal (the coil, with
// the branch's resistance multiplier) drops. The setting is the valve's
// for that Kv, on its handwheel's step; a coil that drops more than the
// valve fully open leaves it fully open (BypassShort).
func (pl *planner) bypasses() {
	m := pl.m
	bypass := plant.State{Bypass: make([]bool, len(m.Branches))}
	for k := range pl.plan.Branches {
		bp := &pl.plan.Branches[k]
		i, ok := m.Index(bp.ID)
		if !ok || m.Branches[i].Bypass == nil {
			continue
		}
		b := &m.Branches[i]
		bp.Bypass, bp.BypassNow = b.BypassModel.Name, b.BypassAsFound
		bp.BypassUnit = b.BypassModel.Unit
		bp.BypassNew, bp.BypassKv, bp.BypassDiff = math.NaN(), math.NaN(), math.NaN()
		q := bp.Target
		bypass.Bypass[i] = true
		drop := func(e hydraulics.Element) float64 {
			if e == nil {
				return 0
			}
			d, _ := e.Drop(q, m.Fluid)
			return d
		}
		coil := drop(m.FixedElement(i, pl.p.Resistance[i])) - drop(m.FixedIn(i, pl.p.Resistance[i], bypass))
		bypass.Bypass[i] = false
		lo, hi := b.Bypass.Range()
		kv, err := hydraulics.KvFromDrop(q, coil, m.Fluid.Density)
		if err != nil {
			// No coil drop to match: the bypass valve is left fully open.
			bp.BypassNew = hi
			continue
		}
		bp.BypassKv = kv
		kvHi, err1 := b.Bypass.KvAt(hi)
		kvLo, err2 := b.Bypass.KvAt(lo)
		switch {
		case err1 == nil && kv >= kvHi:
			bp.BypassNew, bp.BypassShort = hi, kv > kvHi*(1+1e-9)
			continue
		case err2 == nil && kv <= kvLo:
			bp.BypassNew = lo
			continue
		}
		s, err := b.Bypass.SettingFor(kv)
		if err != nil {
			bp.BypassNew = hi
			continue
		}
		if step := b.Bypass.Resolution(); step > 0 {
			s = math.Min(hi, math.Max(lo, math.Round(s/step)*step))
		}
		bp.BypassNew = s
	}
	for k := range pl.plan.Branches {
		bp := &pl.plan.Branches[k]
		i, ok := m.Index(bp.ID)
		if !ok || m.Branches[i].Bypass == nil || math.IsNaN(bp.BypassNew) {
			continue
		}
		if kv, err := m.Branches[i].Bypass.KvAt(bp.BypassNew); err == nil {
			bp.BypassDiff, _ = hydraulics.KvDrop(bp.Target, kv, m.Fluid.Density)
		}
	}
}
