package engine_test

import (
	"bytes"
	"encoding/gob"
	"runtime"
	"strings"
	"sync"
	"testing"

	"hystd/acq/record"
	"hystd/drivers/sim"
)

// loopBytes encodes what a run stored of its loops — raw samples, corrected
// points, figures and corrections — bit for bit (gob keeps every float's bits).
func loopBytes(t *testing.T, ls []record.Loop) []byte {
	t.Helper()
	var buf bytes.Buffer
	enc := gob.NewEncoder(&buf)
	for _, l := range ls {
		if err := enc.Encode(struct {
			N           int
			Kind        string
			Raw         []record.Sample
			Points      []record.Point
			Figures     []record.Figure
			Corrections []record.Correction
		}{l.N, l.Kind, l.Raw, l.Points, l.Figures, l.Corrections}); err != nil {
			t.Fatal(err)
		}
	}
	return buf.Bytes()
}

// busy keeps n goroutines spinning on the CPU until stop is called. They
// yield to the Go scheduler between bursts of arithmetic, as any
// computation-heavy goroutine preempted by the runtime would.
func busy(n int) (stop func()) {
	var wg sync.WaitGroup
	done := make(chan struct{})
	for range n {
		wg.Add(1)
		go func() {
			defer wg.Done()
			x := 1.0
			for {
				select {
				case <-done:
					return
				default:
				}
				for range 1000 {
					x = x*1.0000001 + 1e-9
				}
				runtime.Gosched() // CPU-bound, but not hogging the Go scheduler
			}
		}()
	}
	return func() { close(done); wg.Wait() }
}

// TestDeterministicInSimulatedTime: with the same bench seed and recipe, a
// run in simulated time stores bit-identical raw samples, points and
// figures, whether the machine is quiet or busy — the second run has as
// many CPU-bound goroutines beside it as there are processors. A change
// of seed changes them (the comparison can fail).
func TestDeterministicInSimulatedTime(t *testing.T) {
	cfg, err := sim.DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	rc := strings.ReplaceAll(rateRecipe, "RATE", "1 kA/m/s")
	quiet, _ := ringRun(t, cfg, rc, nil)
	stop := busy(runtime.GOMAXPROCS(0))
	loaded, _ := ringRun(t, cfg, rc, nil)
	stop()
	a, b := loopBytes(t, quiet), loopBytes(t, loaded)
	if len(quiet) == 0 || len(quiet[0].Raw) < 100 || len(quiet[0].Figures) == 0 {
		t.Fatalf("run stored %d loops", len(quiet))
	}
	if !bytes.Equal(a, b) {
		for k := range min(len(quiet[0].Raw), len(loaded[0].Raw)) {
			if quiet[0].Raw[k] != loaded[0].Raw[k] {
				t.Errorf("first difference at raw sample %d:\n quiet  %+v\n loaded %+v", k, quiet[0].Raw[k], loaded[0].Raw[k])
				break
			}
		}
		t.Fatalf("the same seed and recipe stored different loops (%d and %d bytes)", len(a), len(b))
	}
	cfg.Seed++
	other, _ := ringRun(t, cfg, rc, nil)
	if bytes.Equal(a, loopBytes(t, other)) {
		t.Error("another seed stored the same loops: the comparison sees nothing")
	}
	t.Logf("%d loops, %d raw samples, %d bytes compared", len(quiet), len(quiet[0].Raw), len(a))
}
