package fluid

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Kind is the heat-transfer liquid of a circuit.
type Kind int

// The liquids flowset knows. The zero Kind is plain water; the constant is
// PlainWater because Water is the function giving water's properties.
const (
	PlainWater Kind = iota
	EthyleneGlycol
	PropyleneGlycol
)

// ErrUnknownKind is wrapped by ParseKind's error for a name it does not know.
var ErrUnknownKind = errors.New("unknown fluid")

var kindNames = [...]string{
	PlainWater:      "water",
	EthyleneGlycol:  "ethylene-glycol",
	PropyleneGlycol: "propylene-glycol",
}

// String returns the canonical name: "water", "ethylene-glycol" or
// "propylene-glycol".
func (k Kind) String() string {
	if k < 0 || int(k) >= len(kindNames) {
		return "fluid(" + strconv.Itoa(int(k)) + ")"
	}
	return kindNames[k]
}

// ParseKind reads a fluid name: "water", "ethylene-glycol" or "eg",
// "propylene-glycol" or "pg", in any case, with surrounding space ignored
// and "_" or " " accepted for "-".
func ParseKind(s string) (Kind, error) {
	n := strings.ToLower(strings.TrimSpace(s))
	n = strings.NewReplacer("_", "-", " ", "-").Replace(n)
	switch n {
	case "water":
		return PlainWater, nil
	case "ethylene-glycol", "eg":
		return EthyleneGlycol, nil
	case "propylene-glycol", "pg":
		return PropyleneGlycol, nil
	}
	return 0, fmt.Errorf("%w %q (want water, ethylene-glycol/eg or propylene-glycol/pg)", ErrUnknownKind, s)
}

// Concentration limits of the glycol tables, in volume percent.
const (
	MinGlycolPercent = 10.0
	MaxGlycolPercent = 50.0
)

// Spec names a circuit's liquid: water, or a glycol–water mixture.
//
// Percent is the glycol concentration in percent BY VOLUME (volume of
// glycol over volume of solution as mixed), the basis of the ASHRAE tables
// and of how site staff and refractometer scales usually state it. It must
// be 0 for PlainWater and within 10–50 for a glycol.
type Spec struct {
	Kind    Kind
	Percent float64
}

// String describes s, e.g. "ethylene-glycol 30 % by volume".
func (s Spec) String() string {
	if s.Kind == PlainWater {
		return s.Kind.String()
	}
	return fmt.Sprintf("%s %s %% by volume", s.Kind, strconv.FormatFloat(s.Percent, 'g', -1, 64))
}

// Validate reports whether s names a liquid flowset has data for; the error
// wraps ErrOutOfRange or ErrUnknownKind.
func (s Spec) Validate() error {
	switch s.Kind {
	case PlainWater:
		if s.Percent != 0 {
			return fmt.Errorf("water: concentration %g %% %w 0 %% (use ethylene-glycol or propylene-glycol for a mixture)", s.Percent, ErrOutOfRange)
		}
		return nil
	case EthyleneGlycol, PropyleneGlycol:
		if !(s.Percent >= MinGlycolPercent && s.Percent <= MaxGlycolPercent) {
			return fmt.Errorf("%s: concentration %g %% by volume %w %g–%g %%", s.Kind, s.Percent, ErrOutOfRange, MinGlycolPercent, MaxGlycolPercent)
		}
		return nil
	}
	return fmt.Errorf("%w %v", ErrUnknownKind, s.Kind)
}

// At returns the liquid's properties at T [K].
//
// PlainWater uses the function Water (1–150 °C). A glycol interpolates the
// ASHRAE table (glycol_data.go) bilinearly: linear in temperature and in
// concentration for density, and the same for ln μ, because viscosity
// varies roughly exponentially with both. The valid temperatures run from
// the lowest temperature tabulated for both neighbouring concentrations
// (the tables stop at the freezing point) to 125 °C; outside them, and
// outside 10–50 %, the error wraps ErrOutOfRange. Nothing is extrapolated.
func (s Spec) At(T float64) (State, error) {
	if err := s.Validate(); err != nil {
		return State{}, err
	}
	if s.Kind == PlainWater {
		return Water(T)
	}
	tab := &ethyleneGlycolTable
	if s.Kind == PropyleneGlycol {
		tab = &propyleneGlycolTable
	}
	// Rounding to 1e-9 K makes table nodes given in kelvin (5 °C is
	// 278.15 K, not exactly representable) land exactly on the node.
	tC := math.Round((T-273.15)*1e9) / 1e9

	ci, cf := bracket(glycolConcs[:], s.Percent)
	rows := []struct {
		i int
		w float64
	}{{ci, 1 - cf}, {ci + 1, cf}}

	lo, hi := math.Inf(-1), glycolTemps[len(glycolTemps)-1]
	for _, r := range rows {
		if r.w == 0 {
			continue
		}
		lo = math.Max(lo, glycolTemps[firstTabulated(tab.density[r.i][:])])
	}
	if !(tC >= lo && tC <= hi) {
		return State{}, fmt.Errorf("%v: temperature %.6g K %w %g–%g K (%g to %g °C, table range at this concentration)",
			s, T, ErrOutOfRange, lo+273.15, hi+273.15, lo, hi)
	}
	ti, tf := bracket(glycolTemps[:], tC)

	var rho, lnMu float64
	for _, r := range rows {
		if r.w == 0 {
			continue
		}
		for _, c := range [2]struct {
			j int
			w float64
		}{{ti, 1 - tf}, {ti + 1, tf}} {
			if c.w == 0 {
				continue
			}
			w := r.w * c.w
			rho += w * tab.density[r.i][c.j]
			lnMu += w * math.Log(tab.viscosity[r.i][c.j])
		}
	}
	return State{Temperature: T, Density: rho, Viscosity: math.Exp(lnMu) * 1e-3}, nil
}

// bracket returns i and f with xs[i] ≤ x ≤ xs[i+1] and x = xs[i] + f
// (xs[i+1] − xs[i]); at the last node it returns i = len−2, f = 1. x must
// lie within xs.
func bracket(xs []float64, x float64) (int, float64) {
	i := len(xs) - 2
	for k := 0; k < len(xs)-1; k++ {
		if x < xs[k+1] {
			i = k
			break
		}
	}
	return i, (x - xs[i]) / (xs[i+1] - xs[i])
}

// firstTabulated returns the index of the first non-zero entry of row.
func firstTabulated(row []float64) int {
	for j, v := range row {
		if v != 0 {
			return j
		}
	}
	return len(row) - 1
}
