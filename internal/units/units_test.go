package units

import (
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
)

// NIST SP 811 prints factors to 7 significant digits; exact definitions are
// checked to a few ulps.
const (
	exact = 1e-15 // relative
	sig7  = 5e-7  // relative: half a unit in the 7th significant digit is ≤ 5e-7
)

func TestFactorsNIST(t *testing.T) {
	cases := []struct {
		name   string
		kind   Kind
		symbol string
		si     float64 // SI value of one unit
		relTol float64
		source string
	}{
		{"inch", Length, "in", 0.0254, exact, "NIST SP 811 B.8 inch 2.54E-02 m (exact)"},
		{"foot", Length, "ft", 0.3048, exact, "NIST SP 811 B.8 foot 3.048E-01 m (exact)"},
		{"millimetre", Length, "mm", 1e-3, exact, "SI prefix milli (exact)"},
		{"foot of head", Head, "ft", 0.3048, exact, "NIST SP 811 B.8 foot 3.048E-01 m (exact)"},
		{"US gallon per minute", Flow, "gpm", 3.785411784e-3 / 60, exact, "NIST SP 811 B.8 gallon (U.S.) 3.785412E-03 m3 (exact 3.785411784E-03)"},
		{"US gallon per minute, printed", Flow, "gpm", 6.309020e-5, sig7, "NIST SP 811 B.8 gallon (U.S.) per minute 6.309020E-05 m3/s"},
		{"cubic metre per hour", Flow, "m3/h", 1.0 / 3600, exact, "definition of the hour, 3600 s (exact)"},
		{"litre per second", Flow, "l/s", 1e-3, exact, "NIST SP 811 B.8 liter 1.0E-03 m3 (exact)"},
		{"litre per hour", Flow, "L/h", 1e-3 / 3600, exact, "NIST SP 811 B.8 liter 1.0E-03 m3 (exact)"},
		{"psi", Pressure, "psi", 6.894757e3, sig7, "NIST SP 811 B.8 pound-force per square inch 6.894757E+03 Pa"},
		{"bar", Pressure, "bar", 1e5, exact, "NIST SP 811 B.8 bar 1.0E+05 Pa (exact)"},
		{"millibar", Pressure, "mbar", 1e2, exact, "NIST SP 811 B.8 millibar 1.0E+02 Pa (exact)"},
		{"kilopascal", Pressure, "kPa", 1e3, exact, "SI prefix kilo (exact)"},
		{"metre of water", Pressure, "mH2O", 9.80665e3, exact, "NIST SP 811 B.8 meter of water, conventional 9.80665E+03 Pa (exact)"},
		{"metre of water, m wc", Pressure, "m wc", 9.80665e3, exact, "NIST SP 811 B.8 meter of water, conventional 9.80665E+03 Pa (exact)"},
		{"foot of water", Pressure, "ftH2O", 2.989067e3, sig7, "NIST SP 811 B.8 foot of water, conventional 2.989067E+03 Pa"},
		{"inch of water", Pressure, "inH2O", 2.490889e2, sig7, "NIST SP 811 B.8 inch of water, conventional 2.490889E+02 Pa"},
		{"horsepower", Power, "hp", 7.456999e2, sig7, "NIST SP 811 B.8 horsepower (550 ft lbf/s) 7.456999E+02 W"},
		{"pound per cubic foot", Density, "lb/ft3", 1.601846e1, sig7, "NIST SP 811 B.8 pound per cubic foot 1.601846E+01 kg/m3"},
		{"gram per cubic centimetre", Density, "g/cm3", 1e3, exact, "NIST SP 811 B.8 gram per cubic centimeter 1.0E+03 kg/m3 (exact)"},
		{"centipoise", Viscosity, "cP", 1e-3, exact, "NIST SP 811 B.8 centipoise 1.0E-03 Pa s (exact)"},
		{"centistokes", KinematicViscosity, "cSt", 1e-6, exact, "NIST SP 811 B.8 centistokes 1.0E-06 m2/s (exact)"},
		{"square foot per second", KinematicViscosity, "ft2/s", 9.290304e-2, exact, "NIST SP 811 B.8 square foot per second 9.290304E-02 m2/s (exact)"},
		{"Btu per hour", Power, "Btu/h", 2.930711e-1, sig7, "NIST SP 811 B.8 British thermal unit_IT per hour 2.930711E-01 W"},
		{"kilowatt", Power, "kW", 1e3, exact, "SI prefix kilo (exact)"},
		{"Btu", Energy, "Btu", 1.055056e3, sig7, "NIST SP 811 B.8 British thermal unit_IT 1.055056E+03 J"},
		{"kilowatt hour", Energy, "kWh", 3.6e6, exact, "NIST SP 811 B.8 kilowatt hour 3.6E+06 J (exact)"},
		{"foot per second", Velocity, "ft/s", 0.3048, exact, "NIST SP 811 B.8 foot per second 3.048E-01 m/s (exact)"},
		{"percent", Dimensionless, "%", 0.01, exact, "definition of per cent"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			u, err := Lookup(c.kind, c.symbol)
			if err != nil {
				t.Fatalf("Lookup(%v, %q): %v", c.kind, c.symbol, err)
			}
			got := u.ToSI(1)
			if rel := math.Abs(got-c.si) / c.si; rel > c.relTol {
				t.Errorf("Lookup(%v, %q).ToSI(1) = %.10g, want %.10g (%s), rel err %.2g > %.2g",
					c.kind, c.symbol, got, c.si, c.source, rel, c.relTol)
			}
		})
	}
}

func TestTemperature(t *testing.T) {
	// NIST SP 811 B.9: T/K = t/°C + 273.15; T/K = (t/°F + 459.67)/1.8.
	cases := []struct {
		name   string
		symbol string
		in     float64
		want   float64 // K
	}{
		{"ice point °C", "°C", 0, 273.15},
		{"steam point degC", "degC", 100, 373.15},
		{"C spelling", "C", 20, 293.15},
		{"ice point °F", "°F", 32, 273.15},
		{"steam point degF", "degF", 212, 373.15},
		{"absolute zero F", "F", -459.67, 0},
		{"-40 coincides", "°F", -40, 233.15},
		{"kelvin", "K", 300, 300},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			u, err := Lookup(Temperature, c.symbol)
			if err != nil {
				t.Fatalf("Lookup(Temperature, %q): %v", c.symbol, err)
			}
			if got := u.ToSI(c.in); math.Abs(got-c.want) > 1e-12 {
				t.Errorf("Lookup(Temperature, %q).ToSI(%g) = %.15g, want %.15g (NIST SP 811 B.9)", c.symbol, c.in, got, c.want)
			}
		})
	}
}

func TestWaterColumnConstants(t *testing.T) {
	// NIST SP 811 B.8 footnote: conventional water column uses ρ = 1000 kg/m3 and g_n = 9.80665 m/s2.
	u, err := Lookup(Pressure, "mH2O")
	if err != nil {
		t.Fatal(err)
	}
	if got, want := u.ToSI(1), HeadToPressure(1, WaterColumnDensity); got != want {
		t.Errorf("mH2O = %v Pa, HeadToPressure(1 m, %v) = %v", got, WaterColumnDensity, want)
	}
	if got := PressureToHead(HeadToPressure(12.5, 983.2), 983.2); math.Abs(got-12.5) > 1e-12 {
		t.Errorf("PressureToHead(HeadToPressure(12.5)) = %v, want 12.5", got)
	}
}

func TestRoundTrip(t *testing.T) {
	values := []float64{-1234.5, -1, 0, 1e-9, 0.5, 1, 42, 3.7e6}
	for k := Flow; k <= Velocity; k++ {
		for _, sym := range Symbols(k) {
			u, err := Lookup(k, sym)
			if err != nil {
				t.Fatalf("Lookup(%v, %q): %v", k, sym, err)
			}
			for _, v := range values {
				got := u.FromSI(u.ToSI(v))
				if math.Abs(got-v) > 1e-12*math.Max(1, math.Abs(v))*1e3 {
					t.Errorf("%v %q: FromSI(ToSI(%g)) = %.17g", k, sym, v, got)
				}
			}
		}
	}
}

func TestSI(t *testing.T) {
	want := map[Kind]string{
		Flow: "m3/s", Pressure: "Pa", Length: "m", Temperature: "K", Head: "m",
		Dimensionless: "", Power: "W", Energy: "J", Velocity: "m/s",
		Density: "kg/m3", Viscosity: "Pa s", KinematicViscosity: "m2/s",
	}
	got := map[Kind]string{}
	for k := range want {
		u := SI(k)
		got[k] = u.Symbol
		if u.Kind != k || u.ToSI(3.25) != 3.25 || u.FromSI(3.25) != 3.25 {
			t.Errorf("SI(%v) = %+v is not the identity", k, u)
		}
	}
	if diff := cmp.Diff(want, got); diff != "" {
		t.Errorf("SI symbols (-want +got):\n%s", diff)
	}
	if u := SI(Kind(99)); u != (Unit{}) {
		t.Errorf("SI(99) = %+v, want zero Unit", u)
	}
}

func TestSymbolsCanonical(t *testing.T) {
	cases := []struct {
		name   string
		kind   Kind
		symbol string
		want   string
	}{
		{"superscript cube", Flow, "m³/h", "m3/h"},
		{"capital L", Flow, "L/s", "l/s"},
		{"spaces trimmed", Pressure, "  kPa ", "kPa"},
		{"m wc", Pressure, "mwc", "mH2O"},
		{"ft wc", Pressure, "ft wc", "ftH2O"},
		{"degree C", Temperature, "degC", "°C"},
		{"head in feet", Head, "ft", "ft"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			u, err := Lookup(c.kind, c.symbol)
			if err != nil {
				t.Fatalf("Lookup(%v, %q): %v", c.kind, c.symbol, err)
			}
			if u.Symbol != c.want || u.Kind != c.kind {
				t.Errorf("Lookup(%v, %q) = %q %v, want %q %v", c.kind, c.symbol, u.Symbol, u.Kind, c.want, c.kind)
			}
		})
	}
	// Every symbol must belong to exactly one unit of its kind, or Lookup is ambiguous.
	for k := Flow; k <= Velocity; k++ {
		seen := map[string]bool{}
		for _, s := range Symbols(k) {
			if seen[s] {
				t.Errorf("symbol %q listed twice for %v", s, k)
			}
			seen[s] = true
		}
	}
}

func TestErrors(t *testing.T) {
	cases := []struct {
		name    string
		kind    Kind
		symbol  string
		wantErr error
		wantMsg string
	}{
		{"wrong kind", Flow, "kPa", ErrWrongKind, `unit "kPa" is a pressure, not a flow`},
		{"length as pressure", Pressure, "mm", ErrWrongKind, `unit "mm" is a length, not a pressure`},
		{"unknown", Flow, "furlong/fortnight", ErrUnknownUnit, `unknown flow unit "furlong/fortnight" (accepted: m3/s,`},
		{"case matters", Pressure, "KPA", ErrUnknownUnit, `unknown pressure unit "KPA"`},
		{"millipascal is not megapascal", Pressure, "mPa", ErrUnknownUnit, `unknown pressure unit "mPa"`},
		{"empty flow", Flow, "", ErrUnknownUnit, `unknown flow unit ""`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Lookup(c.kind, c.symbol)
			if !errors.Is(err, c.wantErr) {
				t.Fatalf("Lookup(%v, %q) error = %v, want %v", c.kind, c.symbol, err, c.wantErr)
			}
			if !strings.HasPrefix(err.Error(), c.wantMsg) {
				t.Errorf("Lookup(%v, %q) error = %q, want prefix %q", c.kind, c.symbol, err, c.wantMsg)
			}
		})
	}
	if _, err := Find("parsec"); !errors.Is(err, ErrUnknownUnit) || err.Error() != `unknown unit "parsec"` {
		t.Errorf(`Find("parsec") error = %v, want unknown unit "parsec"`, err)
	}
}

func TestFind(t *testing.T) {
	cases := []struct {
		symbol string
		want   Kind
	}{
		{"m", Length}, // shared with Head: table order gives Length
		{"ft", Length},
		{"m3/h", Flow},
		{"psi", Pressure},
		{"°F", Temperature},
		{"kW", Power},
		{"%", Dimensionless},
	}
	for _, c := range cases {
		u, err := Find(c.symbol)
		if err != nil || u.Kind != c.want {
			t.Errorf("Find(%q) = %v, %v; want kind %v", c.symbol, u.Kind, err, c.want)
		}
	}
}

func TestFormat(t *testing.T) {
	m3h, _ := Lookup(Flow, "m3/h")
	kpa, _ := Lookup(Pressure, "kPa")
	degC, _ := Lookup(Temperature, "degC")
	pct, _ := Lookup(Dimensionless, "%")
	cases := []struct {
		name   string
		v      float64
		u      Unit
		digits int
		want   string
	}{
		{"flow", 2.5 / 3600, m3h, 2, "2.50 m3/h"},
		{"pressure", 12345, kpa, 1, "12.3 kPa"},
		{"temperature", 293.15, degC, 1, "20.0 °C"},
		{"shortest", 1500, kpa, -1, "1.5 kPa"},
		{"ratio", 0.125, SI(Dimensionless), 3, "0.125"},
		{"percent", 0.125, pct, 1, "12.5 %"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := Format(c.v, c.u, c.digits); got != c.want {
				t.Errorf("Format(%v, %q, %d) = %q, want %q", c.v, c.u.Symbol, c.digits, got, c.want)
			}
		})
	}
}

func TestKindString(t *testing.T) {
	got := []string{Flow.String(), Pressure.String(), Length.String(), Temperature.String(), Head.String(), Kind(42).String()}
	want := []string{"flow", "pressure", "length", "temperature", "head", "kind(42)"}
	if diff := cmp.Diff(want, got); diff != "" {
		t.Errorf("Kind.String (-want +got):\n%s", diff)
	}
}

func FuzzLookup(f *testing.F) {
	for _, s := range []string{"m3/h", "kPa", "°C", "", " ", "m wc", "\xff", "m³/h"} {
		f.Add(int(Flow), s)
		f.Add(int(Pressure), s)
	}
	f.Fuzz(func(t *testing.T, k int, symbol string) {
		u, err := Lookup(Kind(k), symbol)
		if err == nil {
			if u.Kind != Kind(k) {
				t.Errorf("Lookup(%d, %q) returned kind %v", k, symbol, u.Kind)
			}
			if got := u.FromSI(u.ToSI(1)); math.Abs(got-1) > 1e-9 {
				t.Errorf("Lookup(%d, %q) round trip 1 -> %v", k, symbol, got)
			}
		} else if !errors.Is(err, ErrUnknownUnit) && !errors.Is(err, ErrWrongKind) {
			t.Errorf("Lookup(%d, %q) error %v wraps neither sentinel", k, symbol, err)
		} else {
			_ = err.Error()
		}
		fu, ferr := Find(symbol)
		if ferr == nil {
			if _, err := Lookup(fu.Kind, symbol); err != nil {
				t.Errorf("Find(%q) = %v but Lookup of that kind fails: %v", symbol, fu.Kind, err)
			}
		} else if !errors.Is(ferr, ErrUnknownUnit) {
			t.Errorf("Find(%q) error %v does not wrap ErrUnknownUnit", symbol, ferr)
		}
	})
}
