package units

import (
	"math"
	"math/rand/v2"
	"testing"
)

func rel(a, b float64) float64 { return math.Abs(a-b) / math.Max(math.Abs(b), 1e-300) }

// TestReferenceValues checks the unit conversions against published values.
func TestReferenceValues(t *testing.T) {
	tests := []struct {
		name      string
		got, want float64
		tol       float64 // relative
		source    string
	}{
		{"1 Oe in A/m", float64(FromOersted(1)), 79.5774715, 1e-9, "NBS SP 696, 1 Oe = 10³/(4π) A/m"},
		{"1 MGOe in J/m³", float64(FromMGOe(1)), 7957.747, 1e-7, "from 1 Oe and 1 G (NBS SP 696); 7957.747 computed"},
		{"1 G in T", float64(FromGauss(1)), 1e-4, 1e-15, "NBS SP 696"},
		{"1 emu/cm³ in A/m", float64(FromEmuPerCm3(1)), 1e3, 1e-15, "NBS SP 696 (magnetization)"},
		{"1 erg/cm³ in J/m³", float64(FromErgPerCm3(1)), 0.1, 1e-15, "NIST SP 811 App. B"},
		// B = 1.5 T, H = 10 kA/m: J = 1.5 − 1.25663706212e-6·1e4 = 1.4874336293788 T.
		{"J from B and H", float64(Polarization(1.5, 10e3)), 1.487434, 1e-6 / 1.487434, "CODATA 2018 μ0; J = B − μ0·H (IEC 60404-2)"},
		{"μ0 CODATA 2018", Mu0, 1.25663706212e-6, 1e-15, "CODATA 2018 recommended value"},
	}
	for _, tc := range tests {
		if r := rel(tc.got, tc.want); r > tc.tol {
			t.Errorf("%s: got %.12g, want %.12g (rel err %.2g > %.2g) [%s]", tc.name, tc.got, tc.want, r, tc.tol, tc.source)
		}
	}
}

func TestParse(t *testing.T) {
	tests := []struct {
		in   string
		f    func(string) (float64, error)
		want float64
	}{
		{"1.5 mT", tf(ParseTesla), 0.0015},
		{"13 kG", tf(ParseTesla), 1.3},
		{"1 G", tf(ParseTesla), 1e-4},
		{"985.2 kA/m", tf(ParseAmperePerMetre), 985200},
		{"1 Oe", tf(ParseAmperePerMetre), 1e3 / (4 * math.Pi)},
		{"12 kOe", tf(ParseAmperePerMetre), 12e6 / (4 * math.Pi)},
		{"1 emu/cm3", tf(ParseAmperePerMetre), 1000},
		{"-42", tf(ParseAmperePerMetre), -42},
		{"5.0 mV·s", tf(ParseWeberTurn), 0.005},
		{"5 mVs", tf(ParseWeberTurn), 0.005},
		{"50 mm²", tf(ParseSquareMetre), 50e-6},
		{"50 mm2", tf(ParseSquareMetre), 50e-6},
		{"2 cm2", tf(ParseSquareMetre), 2e-4},
		{"50 mm", tf(ParseMetre), 0.05},
		{"0.94m", tf(ParseMetre), 0.94},
		{"54.1 g", tf(ParseKilogram), 0.0541},
		{"1 kg", tf(ParseKilogram), 1},
		{"7.65 g/cm3", tf(ParseKilogramPerCubicMetre), 7650},
		{"40 MGOe", tf(ParseJoulePerCubicMetre), 40 * 1e5 / (4 * math.Pi)},
		{"320 kJ/m3", tf(ParseJoulePerCubicMetre), 320e3},
		{"10 erg/cm³", tf(ParseJoulePerCubicMetre), 1},
		{"23 °C", tf(ParseCelsius), 23},
		{"250 mA", tf(ParseAmpere), 0.25},
		{"10 µV", tf(ParseVolt), 1e-5},
		{"10 uV", tf(ParseVolt), 1e-5},
		{"5 A/s", tf(ParseAmperePerSecond), 5},
		{"1e-3 T", tf(ParseTesla), 1e-3},
	}
	for _, tc := range tests {
		got, err := tc.f(tc.in)
		if err != nil {
			t.Errorf("%q: %v", tc.in, err)
			continue
		}
		if rel(got, tc.want) > 1e-15 {
			t.Errorf("%q = %.17g, want %.17g", tc.in, got, tc.want)
		}
	}
}

func TestParseErrors(t *testing.T) {
	for _, in := range []string{"", "abc", "1.5 furlong", "1.5 mOe/m", "NaN T", "Inf", "1.5 kkg", "T"} {
		if v, err := ParseTesla(in); err == nil {
			t.Errorf("ParseTesla(%q) = %v, want an error", in, v)
		}
	}
	if _, err := ParseKilogram("1 mkg"); err == nil {
		t.Error("prefix before kg accepted")
	}
}

func tf[T ~float64](f func(string) (T, error)) func(string) (float64, error) {
	return func(s string) (float64, error) { v, err := f(s); return float64(v), err }
}

// TestRoundTrip checks that every type's String parses back to exactly the
// same value.
func TestRoundTrip(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	vals := []float64{0, 1, -1, 1e-300, 1.7976931348623157e308, 5e-324, 0.1, 79.57747154594767}
	for range 200 {
		vals = append(vals, (r.Float64()-0.5)*math.Pow(10, float64(r.IntN(40)-20)))
	}
	for _, v := range vals {
		check := func(name, s string, back func(string) (float64, error)) {
			got, err := back(s)
			if err != nil || got != v && !(got == 0 && v == 0) {
				t.Errorf("%s: %v → %q → %v, %v", name, v, s, got, err)
			}
		}
		check("Ampere", Ampere(v).String(), tf(ParseAmpere))
		check("Volt", Volt(v).String(), tf(ParseVolt))
		check("AmperePerMetre", AmperePerMetre(v).String(), tf(ParseAmperePerMetre))
		check("Tesla", Tesla(v).String(), tf(ParseTesla))
		check("WeberTurn", WeberTurn(v).String(), tf(ParseWeberTurn))
		check("Metre", Metre(v).String(), tf(ParseMetre))
		check("SquareMetre", SquareMetre(v).String(), tf(ParseSquareMetre))
		check("Kilogram", Kilogram(v).String(), tf(ParseKilogram))
		check("KilogramPerCubicMetre", KilogramPerCubicMetre(v).String(), tf(ParseKilogramPerCubicMetre))
		check("JoulePerCubicMetre", JoulePerCubicMetre(v).String(), tf(ParseJoulePerCubicMetre))
		check("Celsius", Celsius(v).String(), tf(ParseCelsius))
		check("AmperePerSecond", AmperePerSecond(v).String(), tf(ParseAmperePerSecond))
	}
}

// TestCGSRoundTrip checks that SI → CGS → SI returns the value within one
// rounding step or two.
func TestCGSRoundTrip(t *testing.T) {
	for _, v := range []float64{1, -985200, 1e-6, 3.2e5, 1.3} {
		pairs := []struct {
			name string
			back float64
		}{
			{"Oe", float64(FromOersted(AmperePerMetre(v).Oersted()))},
			{"emu/cm3", float64(FromEmuPerCm3(AmperePerMetre(v).EmuPerCm3()))},
			{"G", float64(FromGauss(Tesla(v).Gauss()))},
			{"erg/cm3", float64(FromErgPerCm3(JoulePerCubicMetre(v).ErgPerCm3()))},
			{"MGOe", float64(FromMGOe(JoulePerCubicMetre(v).MGOe()))},
		}
		for _, p := range pairs {
			if rel(p.back, v) > 4e-16 {
				t.Errorf("%s: %v came back as %v", p.name, v, p.back)
			}
		}
	}
}

// TestRounded: U to two significant digits and the value to the same
// decimal place (GUM, JCGM 100:2008, 7.2.6). The first case is the GUM's own
// example of 7.2.4, m_S = (100.021 47 ± 0.000 79) g (quoted from memory); the
// others are worked by hand from the rule: 9.96 rounds to 10 (two digits,
// one place up), 99.6 to 100 (so the value goes to the tens), a negative
// value keeps its sign, and a value that rounds to zero is written without
// one.
func TestRounded(t *testing.T) {
	for _, tc := range []struct {
		v, u   float64
		vs, us string
	}{
		{100.02147, 0.00079, "100.02147", "0.00079"},
		{50.8912, 0.6079, "50.89", "0.61"},
		{1.807441, 0.007455, "1.8074", "0.0075"},
		{1.2717561, 0.0028477, "1.2718", "0.0028"},
		{12.586, 0.49, "12.59", "0.49"},
		{9.02, 4.73, "9.0", "4.7"},
		{999.6952, 1.068, "999.7", "1.1"},
		{1234.5, 9.96, "1235", "10"},
		{0.5, 0.0996, "0.50", "0.10"},
		{320204.6, 2834, "320200", "2800"},
		{955123, 1234, "955100", "1200"},
		{48213.7, 99.6, "48210", "100"},
		{-50.0116, 0.0198, "-50.012", "0.020"},
		{-0.00004, 0.0123, "0.000", "0.012"},
		{12345.678, 0, "12345.7", "0"},
		{0.5, math.NaN(), "0.5", "—"},
		{0.5, -1, "0.5", "—"},
		{math.NaN(), 1, "—", "—"},
		{math.Inf(1), 1, "—", "—"},
	} {
		vs, us := Rounded(tc.v, tc.u)
		if vs != tc.vs || us != tc.us {
			t.Errorf("Rounded(%g, %g) = %s ± %s, want %s ± %s", tc.v, tc.u, vs, us, tc.vs, tc.us)
		}
	}
}
