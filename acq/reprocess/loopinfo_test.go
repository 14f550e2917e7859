package reprocess

import (
	"testing"

	"hystd/acq/record"
)

// TestLoopInfoKeepsRamped: what the processor is told of a stored loop
// includes how it was swept, so a ramped loop's re-processing budgets the
// timing uncertainty of a continuous ramp (acq/process, Setup.Ramped) as
// the live run did, and a stepped loop's does not.
func TestLoopInfoKeepsRamped(t *testing.T) {
	for _, ramped := range []bool{true, false} {
		li := loopInfo(record.Loop{Kind: "loop", Amplitude: 800, AmpUnit: "A/m", Ramped: ramped})
		if li.Ramped != ramped || li.Kind != "loop" || li.Amplitude != 800 || li.AmpUnit != "A/m" {
			t.Errorf("loop ramped=%v: processor told %+v", ramped, li)
		}
	}
}
