package network

import (
	"context"
	"fmt"

	"flowset/internal/fluid"
)

// HeldFlow returns the flow a controlled riser's span passes at the
// differential setPoint [Pa]: its own parts (the riser's Elements, with its
// partner valve; not with ControlBelow) in series with its sub-ladder,
// solved alone with setPoint held across them. It is the Hold of the riser's hydraulics.DiffController
// (the span's flow does not depend on anything outside it while the
// controller holds). Controllers inside the sub-ladder must already carry
// their own Hold.
func HeldFlow(ctx context.Context, br Branch, setPoint float64, f fluid.State) (float64, error) {
	if br.Sub == nil {
		return 0, fmt.Errorf("held flow: branch %q has no sub-ladder: %w", br.ID, ErrInput)
	}
	src := Source{Differential: setPoint, Main: br.Elements}
	if br.ControlBelow {
		src.Main = nil // the riser's own parts lie outside the span
	}
	b, err := Build(*br.Sub, src, f)
	if err != nil {
		return 0, fmt.Errorf("held flow of %q: %w", br.ID, err)
	}
	sol, err := b.Net.Solve(ctx, nil)
	if err != nil {
		return 0, fmt.Errorf("held flow of %q: %w", br.ID, err)
	}
	return b.SourceFlow(sol), nil
}

// SourceFlow returns the flow out of the source connection in sol: the main's
// or the pump's where there is one, else the sum over the links leaving the
// supply node.
func (b *Built) SourceFlow(sol *Solution) float64 {
	switch {
	case b.MainLink >= 0:
		return sol.Flow[b.MainLink]
	case b.PumpLink >= 0:
		return sol.Flow[b.PumpLink]
	}
	sup, _ := b.Net.NodeIndex(SupplyID)
	var q float64
	for l := range b.Net.NumLinks() {
		from, to := b.Net.LinkEnds(l)
		switch sup {
		case from:
			q += sol.Flow[l]
		case to:
			q -= sol.Flow[l]
		}
	}
	return q
}
