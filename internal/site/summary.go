package site

import (
	"fmt"
	"slices"
	"strings"
)

// Summary counts what a site holds and names what a calibration will lack.
type Summary struct {
	Branches   int
	Risers     int // branches that other branches hang from
	Valves     int // valve models defined
	PumpPoints int
	Readings   int
	States     []StateCount    // in order of first appearance
	Measured   []BranchReading // one per branch, in sheet order
	// SystemDiff reports whether any state has a pump or header
	// differential, which ties the branch readings to the boundary.
	SystemDiff bool
	// Missing lists, in words, what the readings leave undetermined.
	Missing []string
}

// StateCount is the number of readings taken in one survey state.
type StateCount struct {
	State    string
	Readings int
	// Pump is the state's own pump setting from the states sheet, in
	// words ("speed 0.8", "set point 55 kPa"); "" when it runs at the
	// site's.
	Pump string
	// Moved counts the valves the moves sheet sets in the state.
	Moved int
}

// BranchReading tells how one branch was measured.
type BranchReading struct {
	ID       string
	Readings int
	By       []Measure // distinct quantity and instrument pairs, in reading order
}

// Measure is one quantity read with one instrument kind.
type Measure struct {
	What       Quantity
	Instrument string
	Count      int
}

// String describes m as "flow by clamp-on ×2".
func (m Measure) String() string {
	if m.Instrument == "" {
		return fmt.Sprintf("%s ×%d", m.What, m.Count)
	}
	return fmt.Sprintf("%s by %s ×%d", m.What, m.Instrument, m.Count)
}

// Summary counts the site's contents.
func (s *Site) Summary() Summary {
	sum := Summary{Branches: len(s.Branches), Valves: len(s.Valves), PumpPoints: len(s.Pump), Readings: len(s.Readings)}
	parents := map[string]bool{}
	for _, b := range s.Branches {
		if b.Parent != "" {
			parents[b.Parent] = true
		}
	}
	sum.Risers = len(parents)
	index := map[string]int{}
	for i, b := range s.Branches {
		index[b.ID] = i
		sum.Measured = append(sum.Measured, BranchReading{ID: b.ID})
	}
	for _, r := range s.Readings {
		k := slices.IndexFunc(sum.States, func(c StateCount) bool { return c.State == r.State })
		if k < 0 {
			sum.States = append(sum.States, StateCount{State: r.State, Pump: s.statePump(r.State)})
			k = len(sum.States) - 1
		}
		sum.States[k].Readings++
		if r.What == PumpDiff || r.What == HeaderDiff {
			sum.SystemDiff = true
		}
		i, ok := index[r.Where]
		if !ok {
			continue
		}
		br := &sum.Measured[i]
		br.Readings++
		j := slices.IndexFunc(br.By, func(m Measure) bool { return m.What == r.What && m.Instrument == r.Instrument })
		if j < 0 {
			br.By = append(br.By, Measure{What: r.What, Instrument: r.Instrument})
			j = len(br.By) - 1
		}
		br.By[j].Count++
	}
	for _, mv := range s.Moves {
		if k := slices.IndexFunc(sum.States, func(c StateCount) bool { return c.State == mv.State }); k >= 0 {
			sum.States[k].Moved++
		}
	}
	var unread []string
	for _, m := range sum.Measured {
		if m.Readings == 0 {
			unread = append(unread, m.ID)
		}
	}
	switch {
	case len(s.Readings) == 0:
		sum.Missing = append(sum.Missing, "no readings at all")
	case len(unread) == 1:
		sum.Missing = append(sum.Missing, fmt.Sprintf("branch %s has no reading", unread[0]))
	case len(unread) > 1:
		sum.Missing = append(sum.Missing, fmt.Sprintf("%d branches have no reading: %s", len(unread), joinShort(unread, 8)))
	}
	if !sum.SystemDiff && len(s.Readings) > 0 {
		sum.Missing = append(sum.Missing, "no pump or header differential in any state")
	}
	return sum
}

// joinShort joins up to n names and counts the rest.
func joinShort(names []string, n int) string {
	if len(names) <= n {
		return join(names)
	}
	return fmt.Sprintf("%s and %d more", join(names[:n]), len(names)-n)
}

func join(names []string) string { return strings.Join(names, ", ") }

// statePump words the states sheet's pump setting for a state.
func (s *Site) statePump(label string) string {
	st := s.State(label)
	out := ""
	switch {
	case st == nil:
		return ""
	case st.Speed > 0:
		out = "speed " + fmtNum(st.Speed)
	case st.SetPoint > 0:
		out = "set point " + fmtNum(st.SetPoint/1e3) + " kPa"
	}
	if st.Running > 0 {
		if out != "" {
			out += ", "
		}
		out += fmt.Sprintf("%d of %d pumps running", s.Running(label), len(s.Pumps()))
	}
	return out
}
