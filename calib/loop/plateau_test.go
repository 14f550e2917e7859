package loop

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestTipHeldFlat: a loop whose tips are held flat for 200 samples (a
// closed-loop field control settling at ±1000 A/m) with noise on H of
// 0.5 A/m and on B of 0.2 mT: the tips are the plateaus' means, so each
// tip's H and B come within about 3 standard errors of ±1000 A/m and the
// loop's B there instead of the largest noise (the extreme sample lies ~3σ
// beyond); the last tip, at the record's end, from the line of its ramp.
func TestTipHeldFlat(t *testing.T) {
	// 200 samples: the apex of the flat side's and the ramp's lines; 1000
	// samples: the extreme sample lies inside the plateau with flat lines on
	// both sides, and the plateau's mean is the tip.
	for _, hold := range []int{200, 1000} {
		heldFlat(t, hold)
	}
}

func heldFlat(t *testing.T, hold int) {
	r := rand.New(rand.NewPCG(4, 5))
	var tt, h, b []float64
	add := func(hv, bv float64) {
		tt = append(tt, float64(len(tt))*1e-3)
		h = append(h, hv+0.5*r.NormFloat64())
		b = append(b, bv+2e-4*r.NormFloat64())
	}
	// tanh((H ± 50)/100): the branches meet at the tips to 1e-8 T.
	bOf := func(hv float64, dir int) float64 { return 1.5 * math.Tanh((hv+float64(-dir)*50)/100) }
	for k := 0; k < 5; k++ {
		dir := -1
		if k%2 == 1 {
			dir = 1
		}
		top := float64(-dir) * 1000
		for i := 0; i < hold; i++ {
			add(top, bOf(top, dir))
		}
		for i := 1; i <= 2000; i++ {
			hv := top + float64(dir)*2000*float64(i)/2000
			add(hv, bOf(hv, dir))
		}
	}
	s, err := Detect(h)
	if err != nil {
		t.Fatal(err)
	}
	for _, tp := range s.Tips(tt, h, b) {
		want := 1000.0
		if !tp.Top {
			want = -1000
		}
		if math.Abs(tp.H-want) > 0.2 || math.Abs(math.Abs(tp.B)-1.5*math.Tanh(1050.0/100)) > 1e-4 {
			t.Errorf("hold %d, tip at %d: H %.3f, B %.5f (N %d); want %.0f A/m, %.5f T", hold, tp.Index, tp.H, tp.B, tp.N, want, 1.5*math.Tanh(1050.0/100))
		}
	}
}
