package lsqtest_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"

	"flowset/internal/lsq/lsqtest"
)

type problem interface {
	Dims() (int, int)
	Residuals(x, r []float64, jac *mat.Dense) error
}

// TestCertifiedRSS evaluates each NIST dataset at its certified parameters:
// the residual sum of squares must equal the certified one (NIST StRD). This
// checks the transcription of data and model.
func TestCertifiedRSS(t *testing.T) {
	for _, c := range []*lsqtest.Curve{lsqtest.Misra1a(), lsqtest.Thurber(), lsqtest.MGH09()} {
		t.Run(c.Name, func(t *testing.T) {
			_, m := c.Dims()
			r := make([]float64, m)
			if err := c.Residuals(c.Params, r, nil); err != nil {
				t.Fatal(err)
			}
			// The certified parameters carry 11 digits, so the RSS at them
			// agrees to about 1e-9 relative.
			rss := floats.Dot(r, r)
			if e := math.Abs(rss-c.RSS) / c.RSS; e > 1e-8 {
				t.Errorf("RSS at certified parameters %.10e, certified %.10e (rel %.1e)", rss, c.RSS, e)
			}
			if got := m - len(c.Params); got != c.DOF {
				t.Errorf("observations - parameters = %d, certified DOF %d", got, c.DOF)
			}
			if got := math.Sqrt(c.RSS / float64(c.DOF)); math.Abs(got-c.ResidualSD)/c.ResidualSD > 1e-9 {
				t.Errorf("sqrt(RSS/DOF) = %.10e, certified residual sd %.10e", got, c.ResidualSD)
			}
		})
	}
}

// TestJacobians compares each analytic Jacobian with central differences.
func TestJacobians(t *testing.T) {
	sp := lsqtest.NewSparse(20, 40, 3, 0.02, 9)
	for _, tc := range []struct {
		name string
		p    problem
		x    []float64
	}{
		{name: "Misra1a", p: lsqtest.Misra1a(), x: []float64{250, 5e-4}},
		{name: "Thurber", p: lsqtest.Thurber(), x: []float64{1300, 1500, 500, 75, 1, 0.4, 0.05}},
		{name: "MGH09", p: lsqtest.MGH09(), x: []float64{0.25, 0.39, 0.415, 0.39}},
		{name: "PowerLaw", p: lsqtest.NewPowerLaw(2, 1.9, 8, 0.02, 4), x: []float64{0.5, 1.7}},
		{name: "Sparse", p: sp, x: sp.Truth},
	} {
		t.Run(tc.name, func(t *testing.T) {
			n, m := tc.p.Dims()
			jac := mat.NewDense(m, n, nil)
			r := make([]float64, m)
			if err := tc.p.Residuals(tc.x, r, jac); err != nil {
				t.Fatal(err)
			}
			rp, rm := make([]float64, m), make([]float64, m)
			for j := range n {
				h := 1e-6 * max(math.Abs(tc.x[j]), 1e-3)
				xp := append([]float64(nil), tc.x...)
				xm := append([]float64(nil), tc.x...)
				xp[j] += h
				xm[j] -= h
				if err := tc.p.Residuals(xp, rp, nil); err != nil {
					t.Fatal(err)
				}
				if err := tc.p.Residuals(xm, rm, nil); err != nil {
					t.Fatal(err)
				}
				for i := range m {
					fd := (rp[i] - rm[i]) / (2 * h)
					// Rounding in r (up to ~1e3 for Thurber) over h limits the
					// central difference to about 1e-5 relative.
					if got := jac.At(i, j); math.Abs(got-fd) > 1e-5*max(math.Abs(fd), 1) {
						t.Errorf("J[%d][%d] = %.9g, central difference %.9g", i, j, got, fd)
					}
				}
			}
		})
	}
}

// TestSparseOperator checks MulVec, MulTransVec and DiagJTJ against the dense
// Jacobian.
func TestSparseOperator(t *testing.T) {
	sp := lsqtest.NewSparse(30, 70, 4, 0.02, 5)
	n, m := sp.Dims()
	rng := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, n)
	for j := range x {
		x[j] = rng.NormFloat64() * 0.2
	}
	jac := mat.NewDense(m, n, nil)
	if err := sp.Residuals(x, make([]float64, m), jac); err != nil {
		t.Fatal(err)
	}
	v := make([]float64, n)
	w := make([]float64, m)
	for j := range v {
		v[j] = rng.NormFloat64()
	}
	for i := range w {
		w[i] = rng.NormFloat64()
	}
	jv, jtw, diag := make([]float64, m), make([]float64, n), make([]float64, n)
	sp.MulVec(jv, v)
	sp.MulTransVec(jtw, w)
	sp.DiagJTJ(diag)
	var want mat.VecDense
	want.MulVec(jac, mat.NewVecDense(n, v))
	if !floats.EqualApprox(jv, want.RawVector().Data, 1e-12) {
		t.Errorf("MulVec differs from the dense product")
	}
	var wantT mat.VecDense
	wantT.MulVec(jac.T(), mat.NewVecDense(m, w))
	if !floats.EqualApprox(jtw, wantT.RawVector().Data, 1e-12) {
		t.Errorf("MulTransVec differs from the dense product")
	}
	for j := range n {
		col := mat.Col(nil, j, jac)
		if d := floats.Dot(col, col); math.Abs(diag[j]-d) > 1e-12*d {
			t.Errorf("DiagJTJ[%d] = %v, column norm² %v", j, diag[j], d)
		}
	}
}
