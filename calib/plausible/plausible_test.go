package plausible

import (
	"math"
	"strings"
	"testing"
)

// TestCheck: the ceilings are MaxJ = 2.45 T (no known material exceeds it
// [trade]) and μa = 10⁷. An Epstein strip length written as 305 m instead of
// 0.305 m makes A = m/(4·l·ρ) (IEC 60404-2) a thousand times too small, so a
// 1.8 T loop reads 1800 T.
func TestCheck(t *testing.T) {
	tests := []struct {
		name      string
		jmax, muA float64
		want      []string
	}{
		{"grain-oriented steel at 1.8 T", 1.8, 3e4, nil},
		{"iron-cobalt at saturation", 2.4, 5e3, nil},
		{"negative branch counts by magnitude", -1.8, math.NaN(), nil},
		{"305 m strip", 1802, 3e7, []string{"|J| reaches 1802 T, above the 2.45 T", "μa = 3e+07, above 1e+07"}},
		{"just above the ceiling", 2.46, math.NaN(), []string{"|J| reaches 2.46 T"}},
		{"negative tip", -30, 1e3, []string{"|J| reaches 30 T"}},
		{"permeability only", 1.2, 2e7, []string{"μa = 2e+07"}},
		{"nothing known", math.NaN(), math.NaN(), nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := Check(tc.jmax, tc.muA)
			if len(got) != len(tc.want) {
				t.Fatalf("got %q, want %d findings", got, len(tc.want))
			}
			for i, w := range tc.want {
				if !strings.HasPrefix(got[i], Flag+": ") || !strings.Contains(got[i], w) {
					t.Errorf("finding %q, want %q after %q", got[i], w, Flag)
				}
			}
		})
	}
}
