package fluid

import (
	"errors"
	"fmt"
	"math"
)

// ErrOutOfRange is wrapped by every error for an input outside the range in
// which a property formulation or table is valid. flowset never extrapolates
// fluid properties.
var ErrOutOfRange = errors.New("outside the valid range")

// Limits of the water functions.
const (
	// StandardAtmosphere is 101 325 Pa, the pressure of the 1 atm handbook
	// tables.
	StandardAtmosphere = 101325.0

	// WaterMinTemperature and WaterMaxTemperature bound Water: 1 °C to
	// 150 °C, the liquid range of heating, chilled-water and process-cooling
	// circuits, kept 1 K away from freezing.
	WaterMinTemperature = 274.15
	WaterMaxTemperature = 423.15

	// SubcoolingMargin is the pressure Water keeps above the saturation
	// pressure once that exceeds one atmosphere less this margin; see Water.
	SubcoolingMargin = 50e3
)

// IAPWS-IF97 region 1 and region 4 constants, IAPWS R7-97(2012).
const (
	if97R     = 461.526 // specific gas constant, J/(kg K) (Eq. 1)
	if97PStar = 16.53e6 // region 1 reducing pressure, Pa (Eq. 7)
	if97TStar = 1386.0  // region 1 reducing temperature, K (Eq. 7)

	region1TMin = 273.15
	region1TMax = 623.15
	region1PMax = 100e6
)

// if97Region1 holds I_i, J_i and n_i of IAPWS R7-97(2012) Table 2.
var if97Region1 = [34]struct {
	i, j int
	n    float64
}{
	{0, -2, 0.14632971213167}, {0, -1, -0.84548187169114}, {0, 0, -0.37563603672040e1},
	{0, 1, 0.33855169168385e1}, {0, 2, -0.95791963387872}, {0, 3, 0.15772038513228},
	{0, 4, -0.16616417199501e-1}, {0, 5, 0.81214629983568e-3}, {1, -9, 0.28319080123804e-3},
	{1, -7, -0.60706301565874e-3}, {1, -1, -0.18990068218419e-1}, {1, 0, -0.32529748770505e-1},
	{1, 1, -0.21841717175414e-1}, {1, 3, -0.52838357969930e-4}, {2, -3, -0.47184321073267e-3},
	{2, 0, -0.30001780793026e-3}, {2, 1, 0.47661393906987e-4}, {2, 3, -0.44141845330846e-5},
	{2, 17, -0.72694996297594e-15}, {3, -4, -0.31679644845054e-4}, {3, 0, -0.28270797985312e-5},
	{3, 6, -0.85205128120103e-9}, {4, -5, -0.22425281908000e-5}, {4, -2, -0.65171222895601e-6},
	{4, 10, -0.14341729937924e-12}, {5, -8, -0.40516996860117e-6}, {8, -11, -0.12734301741641e-8},
	{8, -6, -0.17424871230634e-9}, {21, -29, -0.68762131295531e-18}, {23, -31, 0.14478307828521e-19},
	{29, -38, 0.26335781662795e-22}, {30, -39, -0.11947622640071e-22}, {31, -40, 0.18228094581404e-23},
	{32, -41, -0.93537087292458e-25},
}

// if97Region4 holds n_1..n_10 of IAPWS R7-97(2012) Table 34.
var if97Region4 = [10]float64{
	0.11670521452767e4, -0.72421316703206e6, -0.17073846940092e2, 0.12020824702470e5,
	-0.32325550322333e7, 0.14915108613530e2, -0.48232657361591e4, 0.40511340542057e6,
	-0.23855557567849, 0.65017534844798e3,
}

// Saturation-line limits of IF97 region 4 (273.15 K to the critical point).
const (
	region4TMin = 273.15
	region4TMax = 647.096
)

// WaterSaturationPressure returns the vapour pressure [Pa] of water at T [K]
// from the IAPWS-IF97 saturation-pressure equation (R7-97(2012) Eq. 30),
// valid from 273.15 K to the critical temperature 647.096 K.
func WaterSaturationPressure(T float64) (float64, error) {
	if !(T >= region4TMin && T <= region4TMax) {
		return 0, fmt.Errorf("saturation pressure: temperature %.6g K %w %g–%g K", T, ErrOutOfRange, region4TMin, region4TMax)
	}
	n := &if97Region4
	theta := T + n[8]/(T-n[9]) // T* = 1 K
	a := theta*theta + n[0]*theta + n[1]
	b := n[2]*theta*theta + n[3]*theta + n[4]
	c := n[5]*theta*theta + n[6]*theta + n[7]
	x := 2 * c / (-b + math.Sqrt(b*b-4*a*c))
	return x * x * x * x * 1e6, nil // p* = 1 MPa
}

// WaterDensity returns the density [kg/m3] of liquid water at temperature T
// [K] and pressure p [Pa] from the IAPWS-IF97 region 1 Gibbs free energy
// equation (R7-97(2012) Eq. 7 and Table 3: v = (R T / p) π γ_π).
//
// Region 1 is valid for 273.15 K ≤ T ≤ 623.15 K and p_sat(T) ≤ p ≤ 100 MPa;
// outside it, and below the saturation pressure (where water would boil),
// the error wraps ErrOutOfRange.
func WaterDensity(T, p float64) (float64, error) {
	if !(T >= region1TMin && T <= region1TMax) {
		return 0, fmt.Errorf("water density: temperature %.6g K %w %g–%g K (IAPWS-IF97 region 1)", T, ErrOutOfRange, region1TMin, region1TMax)
	}
	ps, err := WaterSaturationPressure(T)
	if err != nil {
		return 0, err
	}
	if !(p >= ps && p <= region1PMax) {
		return 0, fmt.Errorf("water density: pressure %.6g Pa at %.6g K %w %.6g Pa (saturation)–%g Pa (IAPWS-IF97 region 1)", p, T, ErrOutOfRange, ps, region1PMax)
	}
	pi := p / if97PStar
	tau := if97TStar / T
	a, b := 7.1-pi, tau-1.222
	var gpi float64 // γ_π
	for _, c := range &if97Region1 {
		if c.i == 0 {
			continue
		}
		gpi -= c.n * float64(c.i) * math.Pow(a, float64(c.i-1)) * math.Pow(b, float64(c.j))
	}
	v := if97R * T / p * pi * gpi
	return 1 / v, nil
}

// IAPWS 2008 viscosity constants, IAPWS R12-08 (Huber et al., J. Phys.
// Chem. Ref. Data 38 (2009) 101–125).
const (
	viscTStar   = 647.096 // K
	viscRhoStar = 322.0   // kg/m3
	viscMuStar  = 1e-6    // Pa s

	viscTMin   = 273.15 // K, rounded triple point
	viscTMax   = 1173.15
	viscRhoMax = 1300.0 // kg/m3; a generous bound on the release's range [M]
)

// viscH0 is H_i of R12-08 Table 1.
var viscH0 = [4]float64{1.67752, 2.20462, 0.6366564, -0.241605}

// viscH1 is H_ij of R12-08 Table 2, indexed [i][j]; missing entries are zero.
var viscH1 = [6][7]float64{
	{5.20094e-1, 2.22531e-1, -2.81378e-1, 1.61913e-1, -3.25372e-2, 0, 0},
	{8.50895e-2, 9.99115e-1, -9.06851e-1, 2.57399e-1, 0, 0, 0},
	{-1.08374, 1.88797, -7.72479e-1, 0, 0, 0, 0},
	{-2.89555e-1, 1.26613, -4.89837e-1, 0, 6.98452e-2, 0, -4.35673e-3},
	{0, 0, -2.57040e-1, 0, 0, 8.72102e-3, 0},
	{0, 1.20573e-1, 0, 0, 0, 0, -5.93264e-4},
}

// WaterViscosity returns the dynamic viscosity [Pa s] of water at
// temperature T [K] and density rho [kg/m3] from the IAPWS 2008 formulation
// (R12-08 Eqs. 10–12), μ = μ* μ0(T) μ1(T, ρ) μ2.
//
// The critical enhancement μ2 is taken as 1: R12-08 states it is
// significant only in a small region around the critical point, far from
// any liquid flowset models, and its Table 4 check values are computed
// without it.
func WaterViscosity(T, rho float64) (float64, error) {
	if !(T >= viscTMin && T <= viscTMax) {
		return 0, fmt.Errorf("water viscosity: temperature %.6g K %w %g–%g K (IAPWS 2008)", T, ErrOutOfRange, viscTMin, viscTMax)
	}
	if !(rho > 0 && rho <= viscRhoMax) {
		return 0, fmt.Errorf("water viscosity: density %g kg/m3 %w 0–%g kg/m3", rho, ErrOutOfRange, viscRhoMax)
	}
	tb := T / viscTStar
	rb := rho / viscRhoStar

	var s float64
	for i, h := range viscH0 {
		s += h / math.Pow(tb, float64(i))
	}
	mu0 := 100 * math.Sqrt(tb) / s

	x, y := 1/tb-1, rb-1
	var sum float64
	xi := 1.0
	for i := range viscH1 {
		yj := 1.0
		for j := range viscH1[i] {
			sum += viscH1[i][j] * xi * yj
			yj *= y
		}
		xi *= x
	}
	mu1 := math.Exp(rb * sum)
	return mu0 * mu1 * viscMuStar, nil
}

// WaterPressure returns the pressure [Pa] at which Water evaluates liquid
// water at T [K]: one standard atmosphere, or the saturation pressure plus
// SubcoolingMargin where that is higher (from about 82 °C).
//
// Why: the 1 atm handbook tables are the reference below 100 °C, but water
// boils at 1 atm above 99.97 °C, so a hot circuit must be pressurised. The
// effect of pressure on the hydraulics is negligible (about 0.045 kg/m3 per
// bar near 20 °C); the margin only keeps the state liquid with some
// subcooling. Callers who know their system pressure use WaterAt.
func WaterPressure(T float64) (float64, error) {
	ps, err := WaterSaturationPressure(T)
	if err != nil {
		return 0, err
	}
	return math.Max(StandardAtmosphere, ps+SubcoolingMargin), nil
}

// Water returns the properties of liquid water at T [K], 274.15–423.15 K
// (1–150 °C), at the pressure given by WaterPressure. Density is IAPWS-IF97
// region 1, viscosity IAPWS 2008.
func Water(T float64) (State, error) {
	if !(T >= WaterMinTemperature && T <= WaterMaxTemperature) {
		return State{}, fmt.Errorf("water: temperature %.6g K %w %g–%g K (1–150 °C)", T, ErrOutOfRange, WaterMinTemperature, WaterMaxTemperature)
	}
	p, err := WaterPressure(T)
	if err != nil {
		return State{}, err
	}
	return WaterAt(T, p)
}

// WaterAt returns the properties of liquid water at T [K] and a stated
// pressure p [Pa], within IAPWS-IF97 region 1 (see WaterDensity).
func WaterAt(T, p float64) (State, error) {
	rho, err := WaterDensity(T, p)
	if err != nil {
		return State{}, err
	}
	mu, err := WaterViscosity(T, rho)
	if err != nil {
		return State{}, err
	}
	return State{Temperature: T, Density: rho, Viscosity: mu}, nil
}
