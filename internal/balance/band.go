package balance

import (
	"math"

	"flowset/internal/plant"
)

// band propagates the calibration's uncertainty to every predicted flow
// (sensitivities, parameters independent) and sets each branch's band.
func (pl *planner) band(sol *plant.Solved) error {
	u := pl.opt.Uncertainty
	m := pl.m
	limit := bandExactMax
	if pl.opt.bandExactMax != 0 {
		limit = pl.opt.bandExactMax
	}
	sd, err := flowSDWith(m, pl.p, u, sol, limit, pl.opt.Workers)
	if err != nil {
		return err
	}
	k := u.Coverage
	if k == 0 {
		k = 2
	}
	ms := pl.opt.ModelSD
	switch {
	case ms == 0:
		ms = DefaultModelSD
	case ms < 0 || !(ms < math.Inf(1)):
		ms = 0
	}
	pl.plan.Banded = true
	for b := range pl.plan.Branches {
		bp := &pl.plan.Branches[b]
		i, _ := m.Index(bp.ID)
		s := math.Hypot(sd[i], ms)
		bp.BandLow, bp.BandHigh = bp.Percent*math.Exp(-k*s), bp.Percent*math.Exp(k*s)
		bp.BandInTolerance = pl.inBand(bp.BandLow) && pl.inBand(bp.BandHigh)
	}
	return nil
}
