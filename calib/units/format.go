package units

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Symbols printed by the String methods: the coherent SI unit of each type.
const (
	SymAmpere                = "A"
	SymVolt                  = "V"
	SymAmperePerMetre        = "A/m"
	SymTesla                 = "T"
	SymWeberTurn             = "Wb"
	SymMetre                 = "m"
	SymSquareMetre           = "m²"
	SymKilogram              = "kg"
	SymKilogramPerCubicMetre = "kg/m³"
	SymJoulePerCubicMetre    = "J/m³"
	SymCelsius               = "°C"
	SymAmperePerSecond       = "A/s"
)

// format prints v with the shortest decimal that parses back to exactly v.
func format(v float64, sym string) string {
	return strconv.FormatFloat(v, 'g', -1, 64) + " " + sym
}

// String prints the value in its SI unit with the shortest decimal that
// parses back (with the matching ParseX) to exactly the same value, e.g.
// "1.5 T"; the same holds for every quantity type below.
func (v Ampere) String() string                { return format(float64(v), SymAmpere) }
func (v Volt) String() string                  { return format(float64(v), SymVolt) }
func (v AmperePerMetre) String() string        { return format(float64(v), SymAmperePerMetre) }
func (v Tesla) String() string                 { return format(float64(v), SymTesla) }
func (v WeberTurn) String() string             { return format(float64(v), SymWeberTurn) }
func (v Metre) String() string                 { return format(float64(v), SymMetre) }
func (v SquareMetre) String() string           { return format(float64(v), SymSquareMetre) }
func (v Kilogram) String() string              { return format(float64(v), SymKilogram) }
func (v KilogramPerCubicMetre) String() string { return format(float64(v), SymKilogramPerCubicMetre) }
func (v JoulePerCubicMetre) String() string    { return format(float64(v), SymJoulePerCubicMetre) }
func (v Celsius) String() string               { return format(float64(v), SymCelsius) }
func (v AmperePerSecond) String() string       { return format(float64(v), SymAmperePerSecond) }

// unitDef is one accepted unit spelling: value_SI = number·mul/div + add.
// Keeping a divisor lets "1.5 mT" parse to the correctly rounded 0.0015.
type unitDef struct {
	mul, div float64
	prefix   bool // SI prefixes may precede the symbol
	power    int  // the prefix is raised to this power (2 for m², 3 for m³); 0 means 1
}

// si prefixes accepted before a prefixable symbol, as multiplier (>1) or divisor.
var prefixes = map[string]struct{ mul, div float64 }{
	"p": {1, 1e12}, "n": {1, 1e9}, "µ": {1, 1e6}, "μ": {1, 1e6}, "u": {1, 1e6},
	"m": {1, 1e3}, "c": {1, 1e2}, "k": {1e3, 1}, "M": {1e6, 1}, "G": {1e9, 1},
}

// oe and gaussOe are the A/m per Oe and the J/m³ per G·Oe (an MGOe is a
// mega gauss-oersted).
const (
	oe      = AmperePerMetrePerOersted
	gaussOe = TeslaPerGauss * AmperePerMetrePerOersted
)

var tables = map[string]map[string]unitDef{
	"A":     {"A": {1, 1, true, 0}},
	"V":     {"V": {1, 1, true, 0}},
	"A/m":   {"A/m": {1, 1, true, 0}, "Oe": {oe, 1, true, 0}, "emu/cm3": {1e3, 1, false, 0}, "emu/cm³": {1e3, 1, false, 0}},
	"T":     {"T": {1, 1, true, 0}, "G": {1, 1e4, true, 0}},
	"Wb":    {"Wb": {1, 1, true, 0}, "V·s": {1, 1, true, 0}, "Vs": {1, 1, true, 0}, "V*s": {1, 1, true, 0}},
	"m":     {"m": {1, 1, true, 0}},
	"m²":    {"m²": {1, 1, true, 2}, "m2": {1, 1, true, 2}, "m^2": {1, 1, true, 2}},
	"kg":    {"kg": {1, 1, false, 0}, "g": {1, 1e3, true, 0}},
	"kg/m³": {"kg/m³": {1, 1, false, 0}, "kg/m3": {1, 1, false, 0}, "g/cm³": {1e3, 1, false, 0}, "g/cm3": {1e3, 1, false, 0}},
	"J/m³": {"J/m³": {1, 1, true, 0}, "J/m3": {1, 1, true, 0}, "erg/cm³": {1, 10, false, 0}, "erg/cm3": {1, 10, false, 0},
		"GOe": {gaussOe, 1, true, 0}},
	"°C":  {"°C": {1, 1, false, 0}, "degC": {1, 1, false, 0}, "C": {1, 1, false, 0}},
	"A/s": {"A/s": {1, 1, true, 0}},
}

// parse reads "NUMBER [UNIT]" for the quantity whose SI symbol is sym. A
// bare number is taken in the SI unit.
func parse(s, sym string) (float64, error) {
	in := strings.TrimSpace(s)
	if in == "" {
		return 0, fmt.Errorf("empty value, want a number with unit %s", sym)
	}
	num, unit := SplitNumber(in)
	v, err := strconv.ParseFloat(num, 64)
	if err == nil && (math.IsNaN(v) || math.IsInf(v, 0)) {
		return 0, fmt.Errorf("%q: not a finite number", s)
	}
	if err != nil {
		return 0, fmt.Errorf("%q: not a number followed by a unit of %s", s, sym)
	}
	if unit == "" {
		return v, nil
	}
	if v, ok := Scale(v, unit, sym); ok {
		return v, nil
	}
	return 0, fmt.Errorf("%q: unknown unit %q for a quantity in %s (known: %s)", s, unit, sym, known(tables[sym]))
}

// SplitNumber splits a quantity as written, "NUMBER UNIT" ("1.2 kA/m"),
// into the text of its number ("1.2") and its unit ("kA/m"), at the first
// character that cannot belong to the number. Every ParseX, and the
// recipe's levels and rates, read a quantity so.
func SplitNumber(s string) (num, unit string) {
	end := numberEnd(s)
	return s[:end], strings.TrimSpace(s[end:])
}

// Scale converts v, written in unit, to the SI unit of the quantity whose
// symbol is sym, with the SI prefixes and other spellings ParseX accept
// ("kA/m" for "A/m": ×1000, "mT" for "T": ÷1000, correctly rounded); ok
// is false for a unit that is not one of sym's.
func Scale(v float64, unit, sym string) (float64, bool) {
	table := tables[sym]
	if d, ok := table[unit]; ok {
		return v * d.mul / d.div, true
	}
	for p, f := range prefixes {
		rest, ok := strings.CutPrefix(unit, p)
		if !ok {
			continue
		}
		d, ok := table[rest]
		if !ok || !d.prefix {
			continue
		}
		mul, div := f.mul, f.div
		for i := 1; i < d.power; i++ {
			mul, div = mul*f.mul, div*f.div
		}
		return v * d.mul * mul / (d.div * div), true
	}
	return 0, false
}

func known(t map[string]unitDef) string {
	var names []string
	for k := range t {
		names = append(names, k)
	}
	sortStrings(names)
	return strings.Join(names, ", ")
}

func sortStrings(a []string) {
	for i := 1; i < len(a); i++ {
		for j := i; j > 0 && a[j] < a[j-1]; j-- {
			a[j], a[j-1] = a[j-1], a[j]
		}
	}
}

// numberEnd returns the length of the leading floating-point literal of s:
// sign, digits and point, then an exponent when one follows. Without
// digits (Inf and NaN spellings) the first word is taken, for ParseFloat to
// reject or accept.
func numberEnd(s string) int {
	i := 0
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i++
	}
	for i < len(s) && (isDigit(s[i]) || s[i] == '.') {
		i++
	}
	i = exponentEnd(s, i)
	if i == 0 || (i == 1 && (s[0] == '+' || s[0] == '-')) {
		for i < len(s) && s[i] != ' ' {
			i++
		}
	}
	return i
}

// exponentEnd returns the end of an exponent ("e-3") starting at i, or i
// when none starts there (an "e" not followed by digits is not one).
func exponentEnd(s string, i int) int {
	if i >= len(s) || (s[i] != 'e' && s[i] != 'E') {
		return i
	}
	j := i + 1
	if j < len(s) && (s[j] == '+' || s[j] == '-') {
		j++
	}
	if j >= len(s) || !isDigit(s[j]) {
		return i
	}
	for j < len(s) && isDigit(s[j]) {
		j++
	}
	return j
}

func isDigit(c byte) bool { return c >= '0' && c <= '9' }

// ParseAmpere parses a current such as "2.5 A", "250 mA" or "2.5".
func ParseAmpere(s string) (Ampere, error) { v, err := parse(s, SymAmpere); return Ampere(v), err }

// ParseVolt parses a voltage such as "12 V" or "10 µV".
func ParseVolt(s string) (Volt, error) { v, err := parse(s, SymVolt); return Volt(v), err }

// ParseAmperePerMetre parses a field strength: "A/m" with SI prefixes
// ("985 kA/m"), "Oe" ("12.5 kOe") or "emu/cm3" (for a magnetization).
func ParseAmperePerMetre(s string) (AmperePerMetre, error) {
	v, err := parse(s, SymAmperePerMetre)
	return AmperePerMetre(v), err
}

// ParseTesla parses a flux density: "T" with SI prefixes ("4 mT") or "G"
// ("13 kG").
func ParseTesla(s string) (Tesla, error) { v, err := parse(s, SymTesla); return Tesla(v), err }

// ParseWeberTurn parses a flux linkage: "Wb" or "V·s" (also "Vs"), with SI prefixes.
func ParseWeberTurn(s string) (WeberTurn, error) {
	v, err := parse(s, SymWeberTurn)
	return WeberTurn(v), err
}

// ParseMetre parses a length such as "0.94 m" or "50 mm".
func ParseMetre(s string) (Metre, error) { v, err := parse(s, SymMetre); return Metre(v), err }

// ParseSquareMetre parses an area; the prefix is squared ("50 mm²" = 5e-5 m²,
// also spelled "mm2").
func ParseSquareMetre(s string) (SquareMetre, error) {
	v, err := parse(s, SymSquareMetre)
	return SquareMetre(v), err
}

// ParseKilogram parses a mass: "kg" or "g" with SI prefixes ("54.1 g").
func ParseKilogram(s string) (Kilogram, error) {
	v, err := parse(s, SymKilogram)
	return Kilogram(v), err
}

// ParseKilogramPerCubicMetre parses a density: "kg/m³" or "g/cm³".
func ParseKilogramPerCubicMetre(s string) (KilogramPerCubicMetre, error) {
	v, err := parse(s, SymKilogramPerCubicMetre)
	return KilogramPerCubicMetre(v), err
}

// ParseJoulePerCubicMetre parses an energy density: "J/m³" with SI prefixes
// ("320 kJ/m3"), "erg/cm³" or "MGOe".
func ParseJoulePerCubicMetre(s string) (JoulePerCubicMetre, error) {
	v, err := parse(s, SymJoulePerCubicMetre)
	return JoulePerCubicMetre(v), err
}

// ParseCelsius parses a temperature such as "23 °C" (also "degC").
func ParseCelsius(s string) (Celsius, error) { v, err := parse(s, SymCelsius); return Celsius(v), err }

// ParseAmperePerSecond parses a slew rate such as "5 A/s".
func ParseAmperePerSecond(s string) (AmperePerSecond, error) {
	v, err := parse(s, SymAmperePerSecond)
	return AmperePerSecond(v), err
}

// Rounded returns a value and its expanded uncertainty u as text, rounded
// as a result is reported after GUM (JCGM 100:2008) 7.2.6: u to two
// significant digits, the value to the same decimal place (9.96 rounds to
// 10, one digit fewer). This is the one rule of every report in Go: the
// terminal, `hystd analyze`'s table and the PDF report; the store and JSON
// keep full precision. A u of exactly 0 (evaluated, e.g. exact data) gives
// the value to 6 significant digits and "0"; a u not evaluated (NaN,
// infinite or negative) gives the value to 5 significant digits and "—"; a
// value that is not a finite number gives "—" for both.
func Rounded(v, u float64) (value, uncertainty string) {
	switch {
	case math.IsNaN(v) || math.IsInf(v, 0):
		return "—", "—"
	case u == 0:
		return strconv.FormatFloat(v, 'g', 6, 64), "0"
	case !(u > 0) || math.IsInf(u, 0):
		return strconv.FormatFloat(v, 'g', 5, 64), "—"
	}
	e := int(math.Floor(math.Log10(u))) - 1 // decimal exponent of u's second digit
	ur := roundAt(u, e)
	if ur >= math.Pow(10, float64(e+2)) { // 99.6 → 100: three digits, one place up
		e++
		ur = roundAt(u, e)
	}
	vr := roundAt(v, e)
	if vr == 0 {
		vr = 0 // no "-0"
	}
	d := max(-e, 0)
	return strconv.FormatFloat(vr, 'f', d, 64), strconv.FormatFloat(ur, 'f', d, 64)
}

// roundAt rounds x to a multiple of 10^e, dividing by 10^−e for e < 0 so
// that 0.0028 stays the nearest float to 0.0028 (x·1e4/1e4, not x/1e-4).
func roundAt(x float64, e int) float64 {
	if e < 0 {
		p := math.Pow(10, float64(-e))
		return math.Round(x*p) / p
	}
	p := math.Pow(10, float64(e))
	return math.Round(x/p) * p
}
