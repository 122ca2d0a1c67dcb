package network

import "fmt"

// Sensitivity returns the first-order change of every link flow dq and node
// pressure dp when the pressure drop of each link i is increased by the
// small amount dh[i] [Pa] (for a resistance multiplier θ of link i, dh[i] =
// ∂Δp_i/∂θ gives the derivatives with respect to θ). By the implicit
// function theorem on the equations Solve satisfies,
//
//	dp = -S^-1 A21 D^-1 dh,   dq = -D^-1 (dh + A12 dp),
//
// with the factor of S = A21 D^-1 A12 kept from the solution: no new
// factorisation. Fixed-pressure nodes have dp = 0. Links whose slope was
// raised to the solver's floor (zero flow through a square-law element) get
// the floored slope, so their response is that of a very small linear
// resistance.
func (s *Solution) Sensitivity(dh []float64) (dq, dp []float64, err error) {
	pl := s.pl
	dq = make([]float64, len(s.d))
	dp = make([]float64, len(pl.pos))
	if err := s.SensitivityInto(dh, dq, dp, make([]float64, pl.nFree)); err != nil {
		return nil, nil, err
	}
	return dq, dp, nil
}

// SensitivityInto is Sensitivity written into dq (one per link) and dp (one
// per node), with scratch of at least one per unknown pressure; it
// allocates nothing, for the fit's Jacobian products, one per iteration.
func (s *Solution) SensitivityInto(dh, dq, dp, scratch []float64) error {
	pl := s.pl
	if len(dp) != len(pl.pos) {
		return fmt.Errorf("sensitivity: %d pressure changes for %d nodes: %w", len(dp), len(pl.pos), ErrInput)
	}
	if err := s.SensitivityFlows(dh, dq, scratch); err != nil {
		return err
	}
	for node, pos := range pl.pos {
		if pos >= 0 {
			dp[node] = scratch[pos]
		} else {
			dp[node] = 0
		}
	}
	return nil
}

// SensitivityFlows is Sensitivity's flow changes written into dq (one per
// link), with scratch (at least one per unknown pressure) left holding the
// pressure changes of the free nodes by solver position; it allocates
// nothing, for callers that take one sensitivity per parameter of a large
// network.
func (s *Solution) SensitivityFlows(dh, dq, scratch []float64) error {
	nl := len(s.d)
	if len(dh) != nl || len(dq) != nl {
		return fmt.Errorf("sensitivity: %d drop changes and %d flow changes for %d links: %w", len(dh), len(dq), nl, ErrInput)
	}
	pl := s.pl
	if len(scratch) < pl.nFree {
		return fmt.Errorf("sensitivity: scratch of %d for %d unknown pressures: %w", len(scratch), pl.nFree, ErrInput)
	}
	// r = -A21 D^-1 dh
	r := scratch[:pl.nFree]
	clear(r)
	for i, v := range dh {
		if v == 0 {
			// Most links' drops do not change; r holds no -0, so
			// adding ±0 would change nothing.
			continue
		}
		if !finite(v) {
			return fmt.Errorf("sensitivity: drop change %d is %g: %w", i, v, ErrElement)
		}
		t := v / s.d[i]
		if a := pl.pa[i]; a >= 0 {
			r[a] += t
		}
		if b := pl.pb[i]; b >= 0 {
			r[b] -= t
		}
	}
	x, err := s.solveS(r)
	if err != nil {
		return err
	}
	for i := range dq {
		dq[i] = -(dh[i] + at(x, pl.pb[i]) - at(x, pl.pa[i])) / s.d[i]
	}
	return nil
}

// SensitivitiesAt is SensitivityFlows for several drop changes at once,
// each written only at the given links (every link for nil links): dq[k][l] for every l in links is
// SensitivityFlows(dh[k], ...)'s to the bit, the rest of dq[k] is left as it
// was, and scratch[k] (at least one per unknown pressure) holds the
// pressure changes as there. On a sparse factor four right-hand sides are
// solved side by side (see sparseFactor.solve4); for callers that take one
// sensitivity per parameter and read a few links of each.
func (s *Solution) SensitivitiesAt(dh, dq, scratch [][]float64, links []int) error {
	nl := len(s.d)
	pl := s.pl
	if len(dq) != len(dh) || len(scratch) != len(dh) {
		return fmt.Errorf("sensitivity: %d drop changes, %d flow changes and %d scratch: %w", len(dh), len(dq), len(scratch), ErrInput)
	}
	for k := range dh {
		if len(dh[k]) != nl || len(dq[k]) != nl {
			return fmt.Errorf("sensitivity: %d drop changes and %d flow changes for %d links: %w", len(dh[k]), len(dq[k]), nl, ErrInput)
		}
		if len(scratch[k]) < pl.nFree {
			return fmt.Errorf("sensitivity: scratch of %d for %d unknown pressures: %w", len(scratch[k]), pl.nFree, ErrInput)
		}
		// r = -A21 D^-1 dh, as SensitivityFlows.
		r := scratch[k][:pl.nFree]
		clear(r)
		for i, v := range dh[k] {
			if v == 0 {
				continue
			}
			if !finite(v) {
				return fmt.Errorf("sensitivity: drop change %d is %g: %w", i, v, ErrElement)
			}
			t := v / s.d[i]
			if a := pl.pa[i]; a >= 0 {
				r[a] += t
			}
			if b := pl.pb[i]; b >= 0 {
				r[b] -= t
			}
		}
	}
	s.solveMany(scratch)
	for k := range dh {
		x, d, q := scratch[k][:pl.nFree], dh[k], dq[k]
		if links == nil {
			for i := range q {
				q[i] = -(d[i] + at(x, pl.pb[i]) - at(x, pl.pa[i])) / s.d[i]
			}
			continue
		}
		for _, i := range links {
			q[i] = -(d[i] + at(x, pl.pb[i]) - at(x, pl.pa[i])) / s.d[i]
		}
	}
	return nil
}

// solveMany overwrites each xs[k][:nFree] with S⁻¹ of it, four at a time
// on a sparse factor (sparseFactor.solve4: each the same to the bit as
// solve alone).
func (s *Solution) solveMany(xs [][]float64) {
	nf := s.pl.nFree
	if nf == 0 {
		return
	}
	k := 0
	if sf, ok := s.chol.(*sparseFactor); ok {
		for ; k+4 <= len(xs); k += 4 {
			sf.solve4(xs[k], xs[k+1], xs[k+2], xs[k+3])
		}
	}
	for ; k < len(xs); k++ {
		s.chol.solve(xs[k][:nf])
	}
}

// SensitivityIntoN is SensitivityInto for several drop changes at once
// (dh[k] gives dq[k], dp[k], with scratch x[k]), each the same to the bit as
// SensitivityInto alone; the solves go four at a time (solveMany).
func (s *Solution) SensitivityIntoN(dh, dq, dp, x [][]float64) error {
	pl := s.pl
	if len(dp) != len(dh) {
		return fmt.Errorf("sensitivity: %d drop changes and %d pressure changes: %w", len(dh), len(dp), ErrInput)
	}
	for k := range dp {
		if len(dp[k]) != len(pl.pos) {
			return fmt.Errorf("sensitivity: %d pressure changes for %d nodes: %w", len(dp[k]), len(pl.pos), ErrInput)
		}
	}
	if err := s.SensitivitiesAt(dh, dq, x, nil); err != nil {
		return err
	}
	for k := range dp {
		for node, pos := range pl.pos {
			if pos >= 0 {
				dp[k][node] = x[k][pos]
			} else {
				dp[k][node] = 0
			}
		}
	}
	return nil
}

// OwnSensitivities writes into own, for every link i, ∂q_i/∂h_i: the
// first-order change of link i's flow per unit increase of its own drop,
// the diagonal of Sensitivity's response, for all links at the cost of one
// factorisation instead of a solve per link. With the other links seen as
// the resistance R_i between link i's ends (fixed nodes and the pump's
// slope included), ∂q_i/∂h_i = -1/(d_i + R_i); by Sensitivity's formula it
// is -(1 - ρ_i/d_i)/d_i with ρ_i = (e_a - e_b)ᵀ S⁻¹ (e_a - e_b), read
// from the entries of S⁻¹ on the factor's structure (every link's ends are
// among them). The off-diagonal responses (one link's flow to another's
// drop) still need Sensitivity.
func (s *Solution) OwnSensitivities(own []float64) error {
	nl := len(s.d)
	if len(own) != nl {
		return fmt.Errorf("sensitivity: %d own responses for %d links: %w", len(own), nl, ErrInput)
	}
	pl := s.pl
	var z func(a, b int) float64
	if pl.nFree > 0 {
		z = s.chol.inverse()
	}
	for i := range own {
		a, b := pl.pa[i], pl.pb[i]
		var rho float64
		if a >= 0 {
			rho += z(a, a)
		}
		if b >= 0 {
			rho += z(b, b)
		}
		if a >= 0 && b >= 0 {
			rho -= 2 * z(a, b)
		}
		d := s.d[i]
		own[i] = -(1 - rho/d) / d
	}
	return nil
}

// SensitivityT is the transpose (adjoint) product of Sensitivity: given
// weights wq on the link flows and wp on the node pressures, it returns g
// with g[i] = Σ_j wq[j] ∂q_j/∂h_i + Σ_k wp[k] ∂p_k/∂h_i, so a Gauss-Newton
// fit forms Jᵀr with one solve:
//
//	y = S^-1 (wp_free - A21 D^-1 wq),   g = -D^-1 (wq + A12 y).
//
// A nil wq or wp counts as zeros.
func (s *Solution) SensitivityT(wq, wp []float64) ([]float64, error) {
	g := make([]float64, len(s.d))
	if err := s.SensitivityTInto(wq, wp, g, make([]float64, s.pl.nFree)); err != nil {
		return nil, err
	}
	return g, nil
}

// SensitivityTInto is SensitivityT written into g (one per link), with
// scratch of at least one per unknown pressure; it allocates nothing.
func (s *Solution) SensitivityTInto(wq, wp, g, scratch []float64) error {
	nl := len(s.d)
	pl := s.pl
	if wq != nil && len(wq) != nl {
		return fmt.Errorf("sensitivity: %d flow weights for %d links: %w", len(wq), nl, ErrInput)
	}
	if wp != nil && len(wp) != len(pl.pos) {
		return fmt.Errorf("sensitivity: %d pressure weights for %d nodes: %w", len(wp), len(pl.pos), ErrInput)
	}
	if len(g) != nl || len(scratch) < pl.nFree {
		return fmt.Errorf("sensitivity: %d results and scratch of %d for %d links and %d unknown pressures: %w", len(g), len(scratch), nl, pl.nFree, ErrInput)
	}
	r := scratch[:pl.nFree]
	if err := s.adjointRHS(wq, wp, r); err != nil {
		return err
	}
	y, err := s.solveS(r)
	if err != nil {
		return err
	}
	s.adjointOut(wq, y, g)
	return nil
}

// adjointRHS sets r = wp_free - A21 D^-1 wq, SensitivityTInto's right-hand
// side.
func (s *Solution) adjointRHS(wq, wp, r []float64) error {
	pl := s.pl
	clear(r)
	for node, pos := range pl.pos {
		if pos >= 0 && wp != nil {
			if !finite(wp[node]) {
				return fmt.Errorf("sensitivity: pressure weight %d is %g: %w", node, wp[node], ErrElement)
			}
			r[pos] = wp[node]
		}
	}
	for i := range len(s.d) {
		var v float64
		if wq != nil {
			v = wq[i]
		}
		if !finite(v) {
			return fmt.Errorf("sensitivity: flow weight %d is %g: %w", i, v, ErrElement)
		}
		t := v / s.d[i]
		if a := pl.pa[i]; a >= 0 {
			r[a] += t
		}
		if b := pl.pb[i]; b >= 0 {
			r[b] -= t
		}
	}
	return nil
}

// adjointOut sets g = -D^-1 (wq + A12 y) from the solved y.
func (s *Solution) adjointOut(wq, y, g []float64) {
	pl := s.pl
	for i := range g {
		var v float64
		if wq != nil {
			v = wq[i]
		}
		g[i] = -(v + at(y, pl.pb[i]) - at(y, pl.pa[i])) / s.d[i]
	}
}

// SensitivityTIntoN is SensitivityTInto for several sets of weights at
// once (wq[k], wp[k] give g[k], with scratch x[k]; a nil wq or wp slice, or a
// nil entry, counts as zeros), each the same to the bit as SensitivityTInto
// alone; the solves go four at a time (solveMany).
func (s *Solution) SensitivityTIntoN(wq, wp, g, x [][]float64) error {
	nl := len(s.d)
	pl := s.pl
	if len(g) != len(x) || (wq != nil && len(wq) != len(g)) || (wp != nil && len(wp) != len(g)) {
		return fmt.Errorf("sensitivity: %d results, %d scratch, %d flow and %d pressure weights: %w", len(g), len(x), len(wq), len(wp), ErrInput)
	}
	wqOf := func(k int) []float64 {
		if wq == nil {
			return nil
		}
		return wq[k]
	}
	wpOf := func(k int) []float64 {
		if wp == nil {
			return nil
		}
		return wp[k]
	}
	for k := range g {
		wq, wp := wqOf(k), wpOf(k)
		if wq != nil && len(wq) != nl {
			return fmt.Errorf("sensitivity: %d flow weights for %d links: %w", len(wq), nl, ErrInput)
		}
		if wp != nil && len(wp) != len(pl.pos) {
			return fmt.Errorf("sensitivity: %d pressure weights for %d nodes: %w", len(wp), len(pl.pos), ErrInput)
		}
		if len(g[k]) != nl || len(x[k]) < pl.nFree {
			return fmt.Errorf("sensitivity: %d results and scratch of %d for %d links and %d unknown pressures: %w", len(g[k]), len(x[k]), nl, pl.nFree, ErrInput)
		}
		if err := s.adjointRHS(wq, wp, x[k][:pl.nFree]); err != nil {
			return err
		}
	}
	s.solveMany(x)
	for k := range g {
		s.adjointOut(wqOf(k), x[k][:pl.nFree], g[k])
	}
	return nil
}

// solveS solves S x = r with the kept factor.
func (s *Solution) solveS(r []float64) ([]float64, error) {
	if s.pl.nFree == 0 {
		return r, nil
	}
	s.chol.solve(r)
	return r, nil
}

// at returns x[pos], or 0 for a fixed node (pos < 0).
func at(x []float64, pos int) float64 {
	if pos < 0 {
		return 0
	}
	return x[pos]
}
