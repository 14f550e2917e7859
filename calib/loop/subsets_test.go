package loop

import (
	"math"
	"testing"

	"hystd/calib/synth"
)

// TestLossSubsets: the one-pass loss of the 16 interleaved subsets equals
// the loss of each subset integrated on its own.
func TestLossSubsets(t *testing.T) {
	for _, start := range []string{"zero", "tip"} {
		sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 3001, Start: start, Uneven: 0.3, NoiseH: 0.2, NoiseB: 1e-3, Draw: 3}
		_, h, b := sw.Generate(tanhLoop)
		s, err := Detect(h)
		if err != nil {
			t.Fatal(err)
		}
		lp := lossSubsets(h, b, s)
		for p := range nSub {
			if w := loss(h, b, s, p, nSub); math.Abs(w-lp[p]) > 1e-9*math.Abs(w) {
				t.Errorf("%s, subset %d: %v in one pass, %v alone", start, p, lp[p], w)
			}
		}
	}
}
