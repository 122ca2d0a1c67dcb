// Package lsqtest holds known-answer least-squares problems for testing and
// benchmarking the lsq engine, in the manner of gonum's
// optimize/functions. Its types satisfy lsq.Problem (and, for Sparse,
// lsq.Operator and lsq.Preconditioner) structurally, so the
// package does not import lsq.
package lsqtest

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// Curve is a NIST Statistical Reference Dataset for nonlinear regression
// (NIST/ITL StRD, https://www.itl.nist.gov/div898/strd/nls/nls_main.shtml):
// data, model, starting values and certified results. Its residuals are the
// unweighted y_model - y, so certified standard deviations correspond to the
// covariance scaled by the residual variance (lsq.ScaleAlways).
type Curve struct {
	Name  string
	Level string // NIST level of difficulty: "lower", "average" or "higher"
	X, Y  []float64
	// Starts are NIST's "Start 1" and "Start 2".
	Starts [][]float64
	// Params and StdDev are the certified estimates and standard deviations.
	Params, StdDev  []float64
	RSS, ResidualSD float64 // certified residual sum of squares and sd
	DOF             int

	f    func(b []float64, x float64) float64
	grad func(b []float64, x float64, dst []float64)
}

// Dims returns the number of parameters and observations.
func (c *Curve) Dims() (params, obs int) { return len(c.Params), len(c.X) }

// Residuals sets r_i = f(b, x_i) - y_i and, when jac is not nil, its Jacobian.
func (c *Curve) Residuals(b, r []float64, jac *mat.Dense) error {
	if len(b) != len(c.Params) || len(r) != len(c.X) {
		return fmt.Errorf("lsqtest: %s: wrong sizes", c.Name)
	}
	for i, x := range c.X {
		r[i] = c.f(b, x) - c.Y[i]
		if jac != nil {
			c.grad(b, x, jac.RawRowView(i))
		}
	}
	return nil
}

// Model evaluates the curve at x with parameters b.
func (c *Curve) Model(b []float64, x float64) float64 { return c.f(b, x) }

// Misra1a is NIST StRD Misra1a (lower difficulty; Misra, D., NIST 1978,
// dental research monomolecular adsorption study): y = b1(1 - exp(-b2 x)).
// Data and certified values as published by NIST (Misra1a.dat).
func Misra1a() *Curve {
	return &Curve{
		Name:  "Misra1a",
		Level: "lower",
		Y:     []float64{10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47, 81.78},
		X:     []float64{77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1, 760.0},
		Starts: [][]float64{
			{500, 1e-4},
			{250, 5e-4},
		},
		Params:     []float64{2.3894212918e+02, 5.5015643181e-04},
		StdDev:     []float64{2.7070075241e+00, 7.2668688436e-06},
		RSS:        1.2455138894e-01,
		ResidualSD: 1.0187876330e-01,
		DOF:        12,
		f: func(b []float64, x float64) float64 {
			return b[0] * -expm1(-b[1]*x)
		},
		grad: func(b []float64, x float64, d []float64) {
			e := exp(-b[1] * x)
			d[0] = 1 - e
			d[1] = b[0] * x * e
		},
	}
}

// Thurber is NIST StRD Thurber (higher difficulty; Thurber, R., NIST 197?,
// semiconductor electron mobility modelling):
// y = (b1 + b2 x + b3 x² + b4 x³)/(1 + b5 x + b6 x² + b7 x³).
// Data and certified values as published by NIST (Thurber.dat).
func Thurber() *Curve {
	return &Curve{
		Name:  "Thurber",
		Level: "higher",
		Y: []float64{80.574, 84.248, 87.264, 87.195, 89.076, 89.608, 89.868, 90.101, 92.405, 95.854,
			100.696, 101.060, 401.672, 390.724, 567.534, 635.316, 733.054, 759.087, 894.206, 990.785,
			1090.109, 1080.914, 1122.643, 1178.351, 1260.531, 1273.514, 1288.339, 1327.543, 1353.863,
			1414.509, 1425.208, 1421.384, 1442.962, 1464.350, 1468.705, 1447.894, 1457.628},
		X: []float64{-3.067, -2.981, -2.921, -2.912, -2.840, -2.797, -2.702, -2.699, -2.633, -2.481,
			-2.363, -2.322, -1.501, -1.460, -1.274, -1.212, -1.100, -1.046, -0.915, -0.714,
			-0.566, -0.545, -0.400, -0.309, -0.109, -0.103, 0.010, 0.119, 0.377,
			0.790, 0.963, 1.006, 1.115, 1.572, 1.841, 2.047, 2.200},
		Starts: [][]float64{
			{1000, 1000, 400, 40, 0.7, 0.3, 0.03},
			{1300, 1500, 500, 75, 1, 0.4, 0.05},
		},
		Params: []float64{1.2881396800e+03, 1.4910792535e+03, 5.8323836877e+02, 7.5416644291e+01,
			9.6629502864e-01, 3.9797285797e-01, 4.9727297349e-02},
		StdDev: []float64{4.6647963344e+00, 3.9571156086e+01, 2.8698696102e+01, 5.5675370270e+00,
			3.1333340687e-02, 1.4984928198e-02, 6.5842344623e-03},
		RSS:        5.6427082397e+03,
		ResidualSD: 1.3714600784e+01,
		DOF:        30,
		f: func(b []float64, x float64) float64 {
			num := b[0] + x*(b[1]+x*(b[2]+x*b[3]))
			den := 1 + x*(b[4]+x*(b[5]+x*b[6]))
			return num / den
		},
		grad: func(b []float64, x float64, d []float64) {
			num := b[0] + x*(b[1]+x*(b[2]+x*b[3]))
			den := 1 + x*(b[4]+x*(b[5]+x*b[6]))
			q := num / (den * den)
			d[0] = 1 / den
			d[1] = x / den
			d[2] = x * x / den
			d[3] = x * x * x / den
			d[4] = -x * q
			d[5] = -x * x * q
			d[6] = -x * x * x * q
		},
	}
}

// MGH09 is NIST StRD MGH09 (higher difficulty; Kowalik & Osborne 1978, also
// Moré, Garbow & Hillstrom 1981, problem 15):
// y = b1(x² + b2 x)/(x² + b3 x + b4). Data and certified values as
// published by NIST (MGH09.dat).
func MGH09() *Curve {
	return &Curve{
		Name:  "MGH09",
		Level: "higher",
		Y:     []float64{1.957000e-01, 1.947000e-01, 1.735000e-01, 1.600000e-01, 8.440000e-02, 6.270000e-02, 4.560000e-02, 3.420000e-02, 3.230000e-02, 2.350000e-02, 2.460000e-02},
		X:     []float64{4.000000e+00, 2.000000e+00, 1.000000e+00, 5.000000e-01, 2.500000e-01, 1.670000e-01, 1.250000e-01, 1.000000e-01, 8.330000e-02, 7.140000e-02, 6.250000e-02},
		Starts: [][]float64{
			{25, 39, 41.5, 39},
			{0.25, 0.39, 0.415, 0.39},
		},
		Params:     []float64{1.9280693458e-01, 1.9128232873e-01, 1.2305650693e-01, 1.3606233068e-01},
		StdDev:     []float64{1.1435312227e-02, 1.9633220911e-01, 8.0842031232e-02, 9.0025542308e-02},
		RSS:        3.0750560385e-04,
		ResidualSD: 6.6279236551e-03,
		DOF:        7,
		f: func(b []float64, x float64) float64 {
			return b[0] * (x*x + x*b[1]) / (x*x + x*b[2] + b[3])
		},
		grad: func(b []float64, x float64, d []float64) {
			num := x*x + x*b[1]
			den := x*x + x*b[2] + b[3]
			d[0] = num / den
			d[1] = b[0] * x / den
			d[2] = -b[0] * num * x / (den * den)
			d[3] = -b[0] * num / (den * den)
		},
	}
}
