package hydraulics

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
)

// Kv/Cv conversion, exact from the unit definitions (NIST SP 811: 1 US
// gallon = 3.785411784 L, 1 psi = 0.45359237 kg × 9.80665 m/s² / (0.0254
// m)² = 6894.757293168 Pa; 1 bar = 1e5 Pa): Kv = Cv × 0.003785411784 × 60 ×
// √(1e5/6894.757293168).
//
// Cv is defined with water at 60 °F (15.6 °C) and Kv with water at 5-30 °C
// (IEC 60534 refers to 15 °C); the densities differ by under 0.01 %, far
// below valve tolerances, so the conversion ignores the difference.
const (
	KvPerCv = 0.8649776554423018 // Kv [m3/h at 1 bar] per Cv [US gpm at 1 psi]
	CvPerKv = 1.1560992283536565 // Cv per Kv
)

// KvRefDensity is ρ0, the density of water at 15 °C used as the reference of
// the relative density ρ/ρ0 in IEC 60534-2-1 (999.1 kg/m3 as printed there;
// IAPWS-IF97 gives 999.10 kg/m3 at 15 °C, 1 atm).
const KvRefDensity = 999.1

// Unit factors of the Kv definition.
const (
	secondsPerHour = 3600.0
	pascalPerBar   = 1e5
)

// KvDrop returns the pressure drop [Pa] and its slope d(dp)/dq across a
// restriction of flow coefficient kv [m3/h at 1 bar] at flow q [m3/s] of a
// liquid of density rho [kg/m3], from the IEC 60534-2-1 equation for
// non-choked turbulent incompressible flow with F_P = F_R = 1:
//
//	Q = N1 Kv √(Δp / (ρ/ρ0)),  Q in m3/h, Δp in bar, N1 = 1, ρ0 = KvRefDensity.
//
// kv and rho must be positive (otherwise the result is Inf or NaN).
func KvDrop(q, kv, rho float64) (dp, slope float64) {
	r := secondsPerHour / kv
	c := pascalPerBar * rho / KvRefDensity * r * r
	return c * q * math.Abs(q), 2 * c * math.Abs(q)
}

// KvFromDrop returns the flow coefficient Kv [m3/h at 1 bar] that passes
// flow q [m3/s] at pressure drop dp [Pa] for a liquid of density rho, by the
// equation of KvDrop. q and dp must be non-zero and of the same sign.
func KvFromDrop(q, dp, rho float64) (float64, error) {
	if !(rho > 0) || math.IsInf(rho, 1) {
		return 0, fmt.Errorf("kv from drop: density %g kg/m3 must be positive: %w", rho, ErrInvalid)
	}
	if math.IsNaN(q) || math.IsInf(q, 0) || math.IsNaN(dp) || math.IsInf(dp, 0) {
		return 0, fmt.Errorf("kv from drop: flow %g m3/s and drop %g Pa must be finite: %w", q, dp, ErrInvalid)
	}
	if q == 0 || dp == 0 || (q > 0) != (dp > 0) {
		return 0, fmt.Errorf("kv from drop: flow %g m3/s and drop %g Pa must be non-zero and of one sign: %w", q, dp, ErrOutOfRange)
	}
	qh := math.Abs(q) * secondsPerHour
	bar := math.Abs(dp) / pascalPerBar
	return qh * math.Sqrt(rho/KvRefDensity/bar), nil
}

// FixedKv is a restriction known by one flow coefficient: a control valve
// wide open, a fixed orifice, a strainer rated by Kv.
type FixedKv struct {
	Kv float64 // m3/h at 1 bar
}

// Validate reports whether Kv is positive and finite.
func (k FixedKv) Validate() error {
	if !(k.Kv > 0) || math.IsInf(k.Kv, 1) {
		return fmt.Errorf("fixed kv: kv %g must be positive: %w", k.Kv, ErrInvalid)
	}
	return nil
}

// Drop implements Element by KvDrop.
func (k FixedKv) Drop(q float64, f fluid.State) (dp, slope float64) {
	return KvDrop(q, k.Kv, f.Density)
}
