package calibrate

import (
	"context"
	"math"
	"testing"

	"flowset/internal/site"
)

// TestUnseenMixturePrior checks the prior each branch's resistance is
// fitted under on an invented 40-branch plant read at its last 20 branches
// (valve-meter flow and branch differential) and at the pump: an unread
// branch keeps the whole mixture's spread, √((1-p)c²+pw²) by the law of
// total variance for two zero-mean components (any probability text); a
// read one gets the clean or the faulty component's. With every branch
// read, none keeps the mixture's.
func TestUnseenMixturePrior(t *testing.T) {
	ctx := context.Background()
	p, c, w := DefaultFaultShare, DefaultPriorClean, DefaultPriorResistance
	mix := math.Sqrt((1-p)*c*c + p*w*w)
	for _, readFrom := range []int{20, 0} {
		s := newPlantSite(t, plantSpec{branches: 40, arrangement: site.DirectReturn, seed: 41})
		for i, b := range s.Branches {
			if i >= readFrom {
				read(s, "as-found", b.ID, site.Flow, "valve-meter", b.Setting)
				read(s, "as-found", b.ID, site.BranchDiff, "manometer", b.Setting)
			}
		}
		nan := math.NaN()
		read(s, "as-found", site.AtPump, site.PumpDiff, "manometer", nan)
		read(s, "as-found", site.AtPump, site.TotalFlow, "clamp-on", nan)
		m := mustModel(t, s)
		tr := newTruth(m)
		tr.p.Resistance[30] = 3 // one read branch restricted
		simulate(t, m, tr, nil, 1)
		cal, err := Fit(ctx, m, nil)
		if err != nil {
			t.Fatal(err)
		}
		var unseen int
		for _, par := range cal.Parameters {
			if par.Kind != ResistanceParam {
				continue
			}
			i, sd := par.Branch, par.Sigma
			switch {
			case i < readFrom:
				unseen++
				if math.Abs(sd-mix) > 1e-12 {
					t.Errorf("read from %d: unread branch %d fitted under prior sd %.4f, want the mixture's %.4f", readFrom, i, sd, mix)
				}
			case sd != c && sd != w:
				t.Errorf("read from %d: read branch %d fitted under prior sd %.4f, want the clean %.4f or the faulty %.4f component's", readFrom, i, sd, c, w)
			}
		}
		if unseen != readFrom {
			t.Errorf("read from %d: %d unread branches, want %d", readFrom, unseen, readFrom)
		}
	}
}
