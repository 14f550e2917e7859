package engine

import (
	"context"
	"testing"

	"hystd/acq/live"
)

// TestLiveSamplesOfEveryStep: every step's samples are published live —
// those of steps that record no loop (condition, approach, return) as loop
// 0 — and each recorded loop's live samples are exactly its stored samples.
func TestLiveSamplesOfEveryStep(t *testing.T) {
	r := newRig(t)
	if _, err := Run(context.Background(), r.setup(t, twoLoops)); err != nil {
		t.Fatal(err)
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	per := map[int]int{}
	for _, e := range r.evs {
		if e.Kind == live.KindSample {
			per[e.Loop]++
		}
	}
	if per[0] == 0 {
		t.Errorf("no live samples outside the loops: %v", per)
	}
	for _, l := range r.w.Loops {
		if per[l.N] != len(l.Raw) {
			t.Errorf("loop %d: %d live samples, %d stored", l.N, per[l.N], len(l.Raw))
		}
	}
}
