package lsq

import (
	"math"

	"flowset/internal/parallel"
)

// SparseApprox is optional for an Operator problem: ApproxJacobian returns
// the non-zero entries (row i, column j, value) of an approximation J̃ of
// the Jacobian at the latest Residuals call, each (i, j) at most once, whose
// rows touch few parameters. Solve then preconditions its conjugate-gradient
// solves with the block-diagonal part of J̃ᵀWJ̃ + P (+ λD in a step), the
// blocks being the groups of parameters that share rows of J̃ (block Jacobi;
// Saad 2003, "Iterative Methods for Sparse Linear Systems", §10.1), instead
// of the diagonal of JᵀWJ + P alone. J̃ changes only how fast the solves
// converge and how noisy the probed variances are, never what the solves
// converge to: a poor J̃ makes them slower, not wrong. The engine reads the
// three slices before it calls Residuals or ApproxJacobian again and keeps
// none of them, so a problem may hand out the same arrays each time.
type SparseApprox interface {
	ApproxJacobian() (rows, cols []int, vals []float64)
}

// Limits of the block preconditioner: a row of J̃ with more non-zeros (a
// total flow over every branch) is left out, a column with more (the
// header, the pump) stays out of every block, and a group larger than
// maxBlock is split into single parameters. Such a row or column is a
// perturbation of low rank, which costs conjugate gradients an iteration or
// two; spreading it over the diagonal would credit each parameter with the
// whole information of a reading it shares with hundreds.
const (
	maxRowCoupling = 64
	maxBlock       = 64
)

// blockPrec is the block-Jacobi preconditioner M = blocks of J̃ᵀWJ̃/c + P
// + λD, with J̃ from SparseApprox. Parameters outside every block use the
// diagonal alone: the larger of J̃'s and diag(A), which is exact or an
// unbiased estimate of the true one.
type blockPrec struct {
	n      int
	blocks [][]int     // parameters of each block (two or more)
	gram   [][]float64 // per block, J̃ᵀWJ̃ restricted to it, row-major, lower triangle (the rest 0)
	gdiag  []float64   // diag(J̃ᵀWJ̃)
	diagA  []float64   // diag(JᵀWJ) as the engine has it, for the rest
	single []int       // parameters outside every block
	hubs   []int       // those left out for touching many rows
	// current M
	// chol holds per block the lower Cholesky factor L and, in its strict
	// upper triangle (which the factorisation leaves unused), Lᵀ: the
	// backward solve then reads rows, the same numbers in the same order
	// as from L's columns, from memory in order.
	chol [][]float64
	sd   []float64 // per single parameter, √M_jj
}

// newBlockPrec groups the parameters by the rows of J̃ and accumulates
// J̃ᵀWJ̃ on each group, on up to workers goroutines.
func newBlockPrec(n int, rows, cols []int, vals, w, diagA []float64, workers int) *blockPrec {
	bp := &blockPrec{n: n, gdiag: make([]float64, n), diagA: diagA}
	// Rows in order.
	m := len(w)
	start := make([]int, m+1)
	for _, i := range rows {
		start[i+1]++
	}
	for i := range m {
		start[i+1] += start[i]
	}
	next := append([]int(nil), start[:m]...)
	rc := make([]int, len(rows))
	rv := make([]float64, len(rows))
	for k, i := range rows {
		rc[next[i]], rv[next[i]] = cols[k], vals[k]
		next[i]++
	}
	parent := make([]int, n)
	for j := range parent {
		parent[j] = j
	}
	find := func(j int) int {
		for parent[j] != j {
			parent[j] = parent[parent[j]]
			j = parent[j]
		}
		return j
	}
	// A column with many entries (the header, the pump) would join every
	// group into one: it stays on its own.
	colN := make([]int, n)
	for _, j := range cols {
		colN[j]++
	}
	hub := func(j int) bool { return colN[j] > maxRowCoupling }
	for i := range m {
		cs := rc[start[i]:start[i+1]]
		if len(cs) < 2 || len(cs) > maxRowCoupling {
			continue
		}
		r0 := -1
		for _, j := range cs {
			if hub(j) {
				continue
			}
			if r0 < 0 {
				r0 = find(j)
			} else if r := find(j); r != r0 {
				parent[r] = r0
			}
		}
	}
	size := make([]int, n)
	for j := range n {
		size[find(j)]++
	}
	block := make([]int, n) // parameter -> block, -1
	pos := make([]int, n)   // position within its block
	id := map[int]int{}
	for j := range n {
		block[j] = -1
		r := find(j)
		if hub(j) {
			bp.hubs = append(bp.hubs, j)
		}
		if hub(j) || size[r] < 2 || size[r] > maxBlock {
			bp.single = append(bp.single, j)
			continue
		}
		b, ok := id[r]
		if !ok {
			b = len(bp.blocks)
			id[r] = b
			bp.blocks = append(bp.blocks, nil)
		}
		block[j], pos[j] = b, len(bp.blocks[b])
		bp.blocks[b] = append(bp.blocks[b], j)
	}
	bp.gram = make([][]float64, len(bp.blocks))
	for b, ps := range bp.blocks {
		bp.gram[b] = make([]float64, len(ps)*len(ps))
	}
	// The sums split by column: goroutine g adds the entries of the
	// parameters it owns (a block's by the block's number, a single one's
	// by its own), each over the rows in order, as one goroutine would.
	workers = max(min(workers, len(bp.blocks)+len(bp.single)), 1)
	owner := make([]int32, n)
	for j := range n {
		if b := block[j]; b >= 0 {
			owner[j] = int32(b % workers)
		} else {
			owner[j] = int32(j % workers)
		}
	}
	parallel.For(workers, workers, func(_, g int) {
		for i := range m {
			cs, vs := rc[start[i]:start[i+1]], rv[start[i]:start[i+1]]
			if w[i] == 0 || len(cs) > maxRowCoupling {
				continue
			}
			for a, j := range cs {
				if owner[j] != int32(g) {
					continue
				}
				// wa*v is w[i]*vs[a]*v as written out (left to right), so
				// hoisting it changes no bit.
				wa := w[i] * vs[a]
				bp.gdiag[j] += wa * vs[a]
				bj := block[j]
				if bj < 0 {
					continue
				}
				// Only the lower triangle: the factorisation reads no other
				// entry (and the upper one would not be the lower's mirror
				// to the bit: w·v_a·v_e is not w·v_e·v_a).
				k, pj := len(bp.blocks[bj]), pos[j]
				gr := bp.gram[bj][pj*k : pj*k+pj+1]
				for e, l := range cs {
					if block[l] == bj && pos[l] <= pj {
						gr[pos[l]] += wa * vs[e]
					}
				}
			}
		}
	})
	bp.chol = make([][]float64, len(bp.blocks))
	bp.sd = make([]float64, len(bp.single))
	return bp
}

// set factorises M = gram/c + diag(prec) + λ·diag(dscale) (dscale nil: no
// damping). It returns false when a block is not positive definite.
func (bp *blockPrec) set(c float64, prec []float64, lambda float64, dscale []float64) bool {
	damp := func(j int) float64 {
		if dscale == nil {
			return 0
		}
		return lambda * dscale[j]
	}
	for b, ps := range bp.blocks {
		k := len(ps)
		l := bp.chol[b]
		if len(l) != k*k {
			l = make([]float64, k*k)
			bp.chol[b] = l
		}
		for e, v := range bp.gram[b] {
			l[e] = v / c
		}
		for a, j := range ps {
			l[a*k+a] += prec[j] + damp(j)
		}
		if !Cholesky(l, k) {
			return false
		}
		for i := range k {
			for p := range i {
				l[p*k+i] = l[i*k+p]
			}
		}
	}
	for a, j := range bp.single {
		d := bp.gdiag[j]/c + prec[j] + damp(j)
		if bp.diagA != nil {
			d = max(bp.gdiag[j], bp.diagA[j])/c + prec[j] + damp(j)
		}
		if !(d > 0) {
			return false
		}
		bp.sd[a] = math.Sqrt(d)
	}
	return true
}

// lowerSolve sets v ← L⁻¹ v and upperSolve v ← L⁻ᵀ v, with M = L Lᵀ.
func (bp *blockPrec) lowerSolve(v []float64) { bp.lowerSolveOn(v, 1) }

func (bp *blockPrec) upperSolve(v []float64) { bp.upperSolveOn(v, 1) }

// precChunk is the number of blocks a goroutine solves at a time.
const precChunk = 128

// lowerSolveOn and upperSolveOn are lowerSolve and upperSolve with the
// blocks split over up to workers goroutines: the blocks touch disjoint
// entries of v, and each is solved by the same operations.
func (bp *blockPrec) lowerSolveOn(v []float64, workers int) {
	bp.onBlocks(workers, func(lo, hi int) { bp.lowerBlocks(v, lo, hi) })
	for a, j := range bp.single {
		v[j] /= bp.sd[a]
	}
}

func (bp *blockPrec) upperSolveOn(v []float64, workers int) {
	bp.onBlocks(workers, func(lo, hi int) { bp.upperBlocks(v, lo, hi) })
	for a, j := range bp.single {
		v[j] /= bp.sd[a]
	}
}

// onBlocks calls do on ranges of blocks covering them all, on up to
// workers goroutines.
func (bp *blockPrec) onBlocks(workers int, do func(lo, hi int)) {
	nb := len(bp.blocks)
	tasks := (nb + precChunk - 1) / precChunk
	if workers <= 1 || tasks <= 1 {
		do(0, nb)
		return
	}
	parallel.For(workers, tasks, func(_, k int) { do(k*precChunk, min((k+1)*precChunk, nb)) })
}

func (bp *blockPrec) lowerBlocks(v []float64, lo, hi int) {
	var buf [maxBlock]float64
	for b := lo; b < hi; b++ {
		ps := bp.blocks[b]
		k, l := len(ps), bp.chol[b]
		x := buf[:k]
		for a, j := range ps {
			x[a] = v[j]
		}
		for i := range k {
			s := x[i]
			for p := range i {
				s -= l[i*k+p] * x[p]
			}
			x[i] = s / l[i*k+i]
		}
		for a, j := range ps {
			v[j] = x[a]
		}
	}
}

func (bp *blockPrec) upperBlocks(v []float64, lo, hi int) {
	var buf [maxBlock]float64
	for b := lo; b < hi; b++ {
		ps := bp.blocks[b]
		k, lt := len(ps), bp.chol[b]
		x := buf[:k]
		for a, j := range ps {
			x[a] = v[j]
		}
		for i := k - 1; i >= 0; i-- {
			s := x[i]
			row := lt[i*k : (i+1)*k]
			for p := i + 1; p < k; p++ {
				s -= row[p] * x[p]
			}
			x[i] = s / row[i]
		}
		for a, j := range ps {
			v[j] = x[a]
		}
	}
}

// solve sets dst = M⁻¹ r.
func (bp *blockPrec) solve(dst, r []float64) {
	copy(dst, r)
	bp.lowerSolve(dst)
	bp.upperSolve(dst)
}

// localVar returns the variances the local approximation alone gives for
// A = JᵀWJ/c + P: diag(M⁻¹) on the blocks, 1/(J̃ᵀWJ̃/c + P)_jj elsewhere
// (not M's diagonal there, which for a parameter J̃ does not see, such as a
// branch nobody read, holds information it shares with hundreds of others).
func (bp *blockPrec) localVar(c float64, prec []float64) []float64 {
	v := bp.invDiag()
	for _, j := range bp.single {
		if d := bp.gdiag[j]/c + prec[j]; d > 0 {
			v[j] = 1 / d
		}
	}
	return v
}

// invDiag returns diag(M⁻¹).
func (bp *blockPrec) invDiag() []float64 {
	out := make([]float64, bp.n)
	for b, ps := range bp.blocks {
		k, l := len(ps), bp.chol[b]
		// (M⁻¹)_aa = ‖L⁻¹ e_a‖².
		x := make([]float64, k)
		for a := range k {
			clear(x)
			x[a] = 1
			for i := a; i < k; i++ {
				s := x[i]
				for p := a; p < i; p++ {
					s -= l[i*k+p] * x[p]
				}
				x[i] = s / l[i*k+i]
			}
			var s float64
			for _, v := range x[a:] {
				s += v * v
			}
			out[ps[a]] = s
		}
	}
	for a, j := range bp.single {
		out[j] = 1 / (bp.sd[a] * bp.sd[a])
	}
	return out
}
