package grade

import (
	"math"
	"testing"
)

// TestFormatU: two significant digits of U and the value to the same decimal
// place (GUM 7.2.6). The first case is the GUM's own example of 7.2.4,
// m_S = (100.021 47 ± 0.000 79) g (quoted from memory); the others are
// worked by hand from the rule.
func TestFormatU(t *testing.T) {
	cases := []struct {
		v, u   float64
		vs, us string
	}{
		{100.02147, 0.00079, "100.02147", "0.00079"},
		{50.8912, 0.6079, "50.89", "0.61"},
		{1.807441, 0.007455, "1.8074", "0.0075"},
		{12.586, 0.49, "12.59", "0.49"},
		{9.02, 4.73, "9.0", "4.7"},
		{1234.5, 9.96, "1235", "10"},
		{955123, 1234, "955100", "1200"},
		{0.5, math.NaN(), "0.5", "—"},
		{math.NaN(), 1, "—", "—"},
	}
	for _, tc := range cases {
		vs, us := FormatU(tc.v, tc.u)
		if vs != tc.vs || us != tc.us {
			t.Errorf("FormatU(%g, %g) = %s ± %s, want %s ± %s", tc.v, tc.u, vs, us, tc.vs, tc.us)
		}
	}
}
