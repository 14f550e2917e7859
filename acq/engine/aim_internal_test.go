package engine

import (
	"math"
	"testing"
)

// TestNextAmplitude: the search's steps on analytic tip curves whose root is
// known exactly: a straight line is hit by the first secant step, and a
// saturating B = 1.8 T·tanh(a/a0) (a0 = 1 A) reaches 1.5 T, exactly at
// a = atanh(1.5/1.8) = 1.198948… A, within 1e-6 T in at most 8 tries from
// a first try of 0.2 A.
func TestNextAmplitude(t *testing.T) {
	// Straight line B = 0.5·a: the proportional step is exact already.
	if a := nextAmplitude(1, 0.5, 0, 0, false, 1.5); math.Abs(a-3) > 1e-12 {
		t.Errorf("proportional step %g, want 3", a)
	}
	// Straight line with an offset, B = 0.5·a + 0.1: the secant is exact.
	if a := nextAmplitude(2, 1.1, 1, 0.6, true, 1.5); math.Abs(a-2.8) > 1e-12 {
		t.Errorf("secant step %g, want 2.8", a)
	}
	f := func(a float64) float64 { return 1.8 * math.Tanh(a) }
	want := math.Atanh(1.5 / 1.8)
	a, pa, pb, have := 0.2, 0.0, 0.0, false
	tries := 0
	for ; tries < 8; tries++ {
		b := f(a)
		if math.Abs(b-1.5) <= 1e-6 {
			break
		}
		next := nextAmplitude(a, b, pa, pb, have, 1.5)
		pa, pb, have, a = a, b, true, next
	}
	t.Logf("a = %.9f A after %d tries (exact %.9f)", a, tries+1, want)
	if tries == 8 || math.Abs(a-want) > 1e-5 {
		t.Errorf("search ended at %g A after %d tries, want %g", a, tries+1, want)
	}
	// One odd reading cannot send the search beyond 4× or below ¼ of the try.
	if a := nextAmplitude(1, 1e-9, 0, 0, false, 1.5); a != 4 {
		t.Errorf("step after a tiny tip %g, want 4", a)
	}
	if a := nextAmplitude(1, -0.3, 0, 0, false, 1.5); a != 2 {
		t.Errorf("step after a negative tip %g, want 2", a)
	}
}
