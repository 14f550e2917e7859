package recipe

import (
	"testing"

	"hystd/calib/units"
)

// TestAmountGrammar: a recipe reads a level as the configs and the CLI read
// a current or a field strength (calib/units), to the bit; only the units
// it accepts are fewer.
func TestAmountGrammar(t *testing.T) {
	for _, s := range []string{"2.5 A", "0.3 mA", "-7e-1 mA", "1.2 kA/m", "-800 kA/m", "1.6 MA/m", "0.1 A/m", "3e2kA/m"} {
		v, unit, err := parseAmount(s, false)
		if err != nil {
			t.Errorf("%q: %v", s, err)
			continue
		}
		var want float64
		if unit == UnitApm {
			h, err := units.ParseAmperePerMetre(s)
			if err != nil {
				t.Fatal(err)
			}
			want = float64(h)
		} else {
			i, err := units.ParseAmpere(s)
			if err != nil {
				t.Fatal(err)
			}
			want = float64(i)
		}
		if v != want {
			t.Errorf("%q: recipe reads %v, units %v", s, v, want)
		}
	}
	for _, s := range []string{"5", "1 Oe", "2 µA", "x kA/m", "1 kA/m/s"} {
		if _, _, err := parseAmount(s, false); err == nil {
			t.Errorf("%q accepted as a level", s)
		}
	}
}
