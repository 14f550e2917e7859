package uncert

import (
	"math"
	"testing"
)

// TestCombine: GUM §5.1.2 for uncorrelated inputs: u_c² = Σ uᵢ²; with 3 and
// 4 the combined value is 5 and U = k·u_c = 10 for k = 2 (GUM §6.2).
func TestCombine(t *testing.T) {
	var b Budget
	b.Add("a", 3, "")
	b.Add("b", 4, "")
	b.Add("nan", math.NaN(), "")
	b.Add("zero", 0, "")
	if len(b.Components) != 2 {
		t.Fatalf("components %v", b.Components)
	}
	if b.Combined() != 5 || b.Expanded() != 10 {
		t.Errorf("combined %v expanded %v, want 5 and 10", b.Combined(), b.Expanded())
	}
	if d := b.Dominant(); d[0].Name != "b" {
		t.Errorf("dominant %v", d)
	}
	if s := b.Summary("T"); s != "u(k=1) T: b 4, a 3" {
		t.Errorf("summary %q", s)
	}
}

// TestEn: ISO 13528 normalized error; 10 ± 3 against 14 ± 4 gives
// |10 − 14|/√(9 + 16) = 0.8.
func TestEn(t *testing.T) {
	if e := En(10, 3, 14, 4); math.Abs(e-0.8) > 1e-15 {
		t.Errorf("En = %v, want 0.8", e)
	}
	if !math.IsNaN(En(1, 0, 2, 0)) {
		t.Error("En without uncertainties is not NaN")
	}
}
