package network

import (
	"container/heap"
	"math"
	"slices"
)

// sparseAbove is the half bandwidth above which prepare also tries a
// minimum-degree ordering with a sparse Cholesky factor, and keeps it when
// its factor holds under a quarter of the band's entries. Ladders (half
// bandwidth 2) and small nested sites stay on the band, unchanged; a main of
// long risers has a half bandwidth of about twice the terminals a riser
// (60-70 for risers of 30), which made every solve with the factor cost
// 60-70 times the unknowns, while its minimum-degree factor has about two
// entries a column.
const sparseAbove = 16

// factorer is a Cholesky factor of the node matrix that solves with it.
type factorer interface {
	solve(x []float64)
	// inverse returns the entries of the factorised matrix's inverse on
	// the factor's structure: at(a, b) for a == b or for a pair the
	// factor holds (every link's two ends among them).
	inverse() (at func(a, b int) float64)
}

// sparsePlan is the structure of a sparse Cholesky factor L Lᵀ (L = Uᵀ)
// of the node matrix in minimum-degree order: column p of L below the
// diagonal holds rows row[off[p]:off[p+1]], ascending; link i's off-diagonal
// entry of the matrix is value entry[i] (-1 when an end is fixed).
type sparsePlan struct {
	off, row []int
	entry    []int
}

// minimumDegree returns the included nodes in minimum-degree elimination
// order (H. M. Markowitz 1957; A. George & J. W. H. Liu, "The evolution of
// the minimum degree ordering algorithm", SIAM Review 31 (1989) 1-19: the
// plain form, a node of least degree in the elimination graph next, ties by
// node number) and, per node in that order, its neighbours when eliminated:
// the rows of its column of the factor.
func minimumDegree(adj csr, include []bool) (order []int, cols [][]int) {
	nn := len(include)
	nbr := make([][]int, nn)
	for v := range nn {
		if !include[v] {
			continue
		}
		for _, w := range adj.neighbours(v) {
			if include[w] && !slices.Contains(nbr[v], w) {
				nbr[v] = append(nbr[v], w)
			}
		}
	}
	gone := make([]bool, nn)
	h := &degreeHeap{}
	for v := range nn {
		if include[v] {
			h.items = append(h.items, degreeItem{len(nbr[v]), v})
		}
	}
	heap.Init(h)
	for h.Len() > 0 {
		it := heap.Pop(h).(degreeItem)
		v := it.node
		if gone[v] || it.deg != len(nbr[v]) {
			continue // stale entry
		}
		gone[v] = true
		ns := nbr[v]
		order = append(order, v)
		cols = append(cols, ns)
		for _, u := range ns {
			nu := slices.DeleteFunc(nbr[u], func(x int) bool { return x == v })
			for _, w := range ns {
				if w != u && !slices.Contains(nu, w) {
					nu = append(nu, w)
				}
			}
			nbr[u] = nu
			heap.Push(h, degreeItem{len(nu), u})
		}
		nbr[v] = nil
	}
	return order, cols
}

type degreeItem struct{ deg, node int }

type degreeHeap struct{ items []degreeItem }

func (h *degreeHeap) Len() int { return len(h.items) }
func (h *degreeHeap) Less(i, j int) bool {
	a, b := h.items[i], h.items[j]
	return a.deg < b.deg || a.deg == b.deg && a.node < b.node
}
func (h *degreeHeap) Swap(i, j int) { h.items[i], h.items[j] = h.items[j], h.items[i] }
func (h *degreeHeap) Push(x any)    { h.items = append(h.items, x.(degreeItem)) }
func (h *degreeHeap) Pop() any {
	x := h.items[len(h.items)-1]
	h.items = h.items[:len(h.items)-1]
	return x
}

// newSparsePlan lays out the factor's columns for the elimination order
// and columns of minimumDegree, with pos the node positions in that order.
func newSparsePlan(cols [][]int, pos []int, links []link) *sparsePlan {
	sp := &sparsePlan{off: make([]int, len(cols)+1)}
	for p, c := range cols {
		sp.off[p+1] = sp.off[p] + len(c)
	}
	sp.row = make([]int, sp.off[len(cols)])
	for p, c := range cols {
		r := sp.row[sp.off[p]:sp.off[p+1]]
		for k, node := range c {
			r[k] = pos[node]
		}
		slices.Sort(r)
	}
	sp.entry = make([]int, len(links))
	for i, l := range links {
		sp.entry[i] = -1
		a, b := pos[l.from], pos[l.to]
		if a < 0 || b < 0 {
			continue
		}
		lo, hi := min(a, b), max(a, b)
		sp.entry[i] = sp.find(lo, hi)
	}
	return sp
}

// find returns the index of row r in column p (present by construction).
func (sp *sparsePlan) find(p, r int) int {
	rows := sp.row[sp.off[p]:sp.off[p+1]]
	k, _ := slices.BinarySearch(rows, r)
	return sp.off[p] + k
}

// sparseFactor is the factor L Lᵀ: diag its diagonal, val the entries
// below it by sparsePlan's columns, rd the reciprocals of the diagonal.
type sparseFactor struct {
	sp       *sparsePlan
	diag, rd []float64
	val      []float64
}

// factorSparse factorises in place the matrix with diagonal diag and
// off-diagonal entries val (laid out by sp): column by column, each scaled
// column's outer product taken off the columns to its right. It reports
// false when the matrix is not positive definite.
func factorSparse(sp *sparsePlan, diag, val, rd []float64) (*sparseFactor, bool) {
	f := &sparseFactor{sp: sp, diag: diag, val: val, rd: rd}
	for p := range diag {
		d := diag[p]
		if !(d > 0) {
			return f, false
		}
		d = math.Sqrt(d)
		diag[p] = d
		r := 1 / d
		rd[p] = r
		lo, hi := sp.off[p], sp.off[p+1]
		for e := lo; e < hi; e++ {
			val[e] *= r
		}
		for e := lo; e < hi; e++ {
			i, vi := sp.row[e], val[e]
			diag[i] -= vi * vi
			for e2 := e + 1; e2 < hi; e2++ {
				val[sp.find(i, sp.row[e2])] -= vi * val[e2]
			}
		}
	}
	return f, true
}

// solve overwrites x with A^-1 x: L y = x forwards, then Lᵀ x = y
// backwards.
func (f *sparseFactor) solve(x []float64) {
	sp, val, rd := f.sp, f.val, f.rd
	n := len(rd)
	for p := range n {
		xp := x[p] * rd[p]
		x[p] = xp
		if xp == 0 {
			// A sensitivity's right-hand side has two entries: most of
			// the forward pass would scatter zeros. Skipping them
			// changes no bit of a nonzero result (x - (±0) is x), at
			// most the sign of an exact zero.
			continue
		}
		for e := sp.off[p]; e < sp.off[p+1]; e++ {
			x[sp.row[e]] -= val[e] * xp
		}
	}
	for p := n - 1; p >= 0; p-- {
		var sum float64
		for e := sp.off[p]; e < sp.off[p+1]; e++ {
			sum += val[e] * x[sp.row[e]]
		}
		x[p] = (x[p] - sum) * rd[p]
	}
}

// solve4 is solve on four right-hand sides at once: each by the same
// operations in the same order as solve (zero entries skipped the same
// way), so each result is solve's to the bit. A solve alone is a chain of
// dependent operations, each entry waiting on the one before; four
// independent chains side by side keep the processor busy while each
// waits.
func (f *sparseFactor) solve4(a, b, c, d []float64) {
	sp, val, rd := f.sp, f.val, f.rd
	n := len(rd)
	a, b, c, d = a[:n], b[:n], c[:n], d[:n]
	off, row := sp.off, sp.row
	for p := range n {
		r := rd[p]
		xa, xb, xc, xd := a[p]*r, b[p]*r, c[p]*r, d[p]*r
		a[p], b[p], c[p], d[p] = xa, xb, xc, xd
		lo, hi := off[p], off[p+1]
		if xa != 0 {
			for e := lo; e < hi; e++ {
				a[row[e]] -= val[e] * xa
			}
		}
		if xb != 0 {
			for e := lo; e < hi; e++ {
				b[row[e]] -= val[e] * xb
			}
		}
		if xc != 0 {
			for e := lo; e < hi; e++ {
				c[row[e]] -= val[e] * xc
			}
		}
		if xd != 0 {
			for e := lo; e < hi; e++ {
				d[row[e]] -= val[e] * xd
			}
		}
	}
	for p := n - 1; p >= 0; p-- {
		var sa, sb, sc, sd float64
		for e := off[p]; e < off[p+1]; e++ {
			i, v := row[e], val[e]
			sa += v * a[i]
			sb += v * b[i]
			sc += v * c[i]
			sd += v * d[i]
		}
		r := rd[p]
		a[p] = (a[p] - sa) * r
		b[p] = (b[p] - sb) * r
		c[p] = (c[p] - sc) * r
		d[p] = (d[p] - sd) * r
	}
}

// inverse computes the entries Z = (L Lᵀ)⁻¹ on the structure of L by the
// recurrences of Erisman & Tinney (1975, "On computing certain elements of
// the inverse of a sparse matrix", Comm. ACM 18(3)), columns last to first:
// Lᵀ Z = L⁻¹ gives, for i in the structure of column p,
//
//	Z_ip = -(1/L_pp) Σ_k L_kp Z_ik,   Z_pp = (1/L_pp - Σ_k L_kp Z_kp)/L_pp,
//
// with k over the same structure, whose pairs the factor holds (the fill of
// eliminating p). The cost is that of the factorisation: linear on the
// networks the sparse factor is chosen for.
func (f *sparseFactor) inverse() func(a, b int) float64 {
	sp, val, rd := f.sp, f.val, f.rd
	n := len(rd)
	zd := make([]float64, n)
	zv := make([]float64, len(val))
	at := func(i, j int) float64 {
		if i == j {
			return zd[i]
		}
		if i > j {
			i, j = j, i
		}
		return zv[sp.find(i, j)]
	}
	for p := n - 1; p >= 0; p-- {
		lo, hi := sp.off[p], sp.off[p+1]
		for e := lo; e < hi; e++ {
			i := sp.row[e]
			var s float64
			for e2 := lo; e2 < hi; e2++ {
				s += val[e2] * at(i, sp.row[e2])
			}
			zv[e] = -s * rd[p]
		}
		var s float64
		for e := lo; e < hi; e++ {
			s += val[e] * zv[e]
		}
		zd[p] = (rd[p] - s) * rd[p]
	}
	return at
}
