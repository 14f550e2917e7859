package demo

import (
	"context"
	"io"
	"testing"

	"hystd/acq/record"
)

// BenchmarkBufferedVsPolledPointsPerLoop runs the demo polled, buffered
// (stepped) and buffered with the supply ramping in turn (one interleaved
// triple per iteration), in simulated time on the
// same bench and seed, and reports the sweep samples of the last loop of
// each, their ratio, and the sweep's span in simulated seconds (the same
// planned sweep: 5 s). The peer is the polled demo itself:
//
//	go test ./acq/demo -run XXX -bench BufferedVsPolled -benchtime 3x
func BenchmarkBufferedVsPolledPointsPerLoop(b *testing.B) {
	var pol, buf, rmp, spanP, spanB, spanR float64
	for b.Loop() {
		for _, capture := range []string{"polled", "buffered", "ramp"} {
			o := Options{DataDir: b.TempDir(), Out: io.Discard, Software: "bench", Capture: capture, Clock: simClock()}
			if capture == "ramp" {
				o.Capture, o.Sweep = "buffered", "ramp"
			}
			res, err := Run(context.Background(), o)
			if err != nil || res.Run.State != record.Finished || len(res.Loops) == 0 {
				b.Fatalf("%s demo: %v %s", capture, err, res.Run.Reason)
			}
			sw := sweepOf(res.Loops[len(res.Loops)-1])
			n, span := float64(len(sw)), (sw[len(sw)-1].T - sw[0].T).Seconds()
			switch capture {
			case "polled":
				pol, spanP = n, span
			case "buffered":
				buf, spanB = n, span
			default:
				rmp, spanR = n, span
			}
		}
	}
	b.ReportMetric(pol, "polled-points/loop")
	b.ReportMetric(buf, "buffered-points/loop")
	b.ReportMetric(buf/pol, "buffered/polled")
	b.ReportMetric(spanP, "polled-sweep-s")
	b.ReportMetric(spanB, "buffered-sweep-s")
	b.ReportMetric(rmp, "ramped-points/loop")
	b.ReportMetric(rmp/pol, "ramped/polled")
	b.ReportMetric(spanR, "ramped-sweep-s")
}
