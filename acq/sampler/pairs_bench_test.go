package sampler

import (
	"bytes"
	"context"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"
)

// pairSamples is how many samples each side reads in one turn of a pair.
const pairSamples = 200

// inPairs times the two sides in alternating turns (a first in even pairs,
// b first in odd ones) after one untimed pair, and reports each side's
// samples/s, their ratio (a-per-b: a's rate over b's; above 1 a is faster)
// and the 1-minute load average at the start and the end. It returns a's
// rate.
func inPairs(bm *testing.B, aName, bName string, a, b func() time.Duration) float64 {
	a()
	b()
	load0 := loadAvg()
	var ta, tb time.Duration
	bm.ResetTimer()
	for i := 0; i < bm.N; i++ {
		if i%2 == 0 {
			ta += a()
			tb += b()
		} else {
			tb += b()
			ta += a()
		}
	}
	bm.StopTimer()
	n := float64(bm.N * pairSamples)
	ra, rb := n/ta.Seconds(), n/tb.Seconds()
	bm.ReportMetric(ra, aName+"-samples/s")
	bm.ReportMetric(rb, bName+"-samples/s")
	bm.ReportMetric(ra/rb, aName+"-per-"+bName)
	bm.ReportMetric(load0, "load-start")
	bm.ReportMetric(loadAvg(), "load-end")
	return ra
}

// loadAvg is the 1-minute load average (NaN where /proc is missing).
func loadAvg() float64 {
	raw, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return math.NaN()
	}
	v, _ := strconv.ParseFloat(strings.Fields(string(raw))[0], 64)
	return v
}

// turn reads pairSamples samples with read and returns the time taken.
func turn(b *testing.B, read func(context.Context) error) time.Duration {
	ctx := context.Background()
	t := time.Now()
	for range pairSamples {
		if err := read(ctx); err != nil {
			b.Fatal(err)
		}
	}
	return time.Since(t)
}

// BenchmarkSampleBesideInTurn: the Sampler against reading the same
// channels one after another, on the same three ptys, in interleaved turns
// of 200 samples: with instant replies (the case the overlapped round must
// not lose: measured 0.88–1.26×, median 1.01×, even within the noise of a
// shared 2-core machine at load 2.4–6.5) and on emulated full-duplex 115 200 Bd
// lines (see DEVELOPERS.md "Current figures" for the ratios and loads).
func BenchmarkSampleBesideInTurn(b *testing.B) {
	for _, c := range []struct {
		name string
		baud int
	}{{"reply-delay=0", 0}, {"line=115200Bd", 115200}} {
		b.Run(c.name, func(b *testing.B) {
			roles := openBench(b, 0, c.baud)
			s, err := New(roles, time.Now())
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			_ = inPairs(b, "sampler", "in-turn",
				func() time.Duration {
					return turn(b, func(ctx context.Context) error { _, err := s.Read(ctx); return err })
				},
				func() time.Duration {
					return turn(b, func(ctx context.Context) error { return readSequential(ctx, roles) })
				})
		})
	}
}

// debianPython is the interpreter Debian's python3-serial installs into.
const debianPython = "/usr/bin/python3"

// BenchmarkSampleBesidePyserial: the Sampler against a sequential polling
// script with pyserial (testdata/bench/poll_pyserial.py: the same four
// queries, each answered before the next is sent) on emulated 115 200 Bd
// lines, each side on its own three ptys with the same responders, in
// interleaved turns of 200 samples. The script times its own polling loop
// (not the interpreter's start). sampler-per-pyserial is the ratio of
// sample rates (goal ≥ 2.5×; see DEVELOPERS.md "Current figures" for what
// was measured, with the load); line-% is the Sampler's rate against what
// the emulated lines allow (see lineLimit): the supply's two queries,
// queued back to back (sim-supply's queued_queries: 2), bound it, against
// the script's four exchanges in turn. line-% can pass 100: the emulated
// limit pays this machine's timer overshoot on every reply, which a second
// queued reply whose time has passed meanwhile does not; nominal-line-% is
// the rate against the exact line times (what a real 115 200 Bd line
// allows). It skips without python3-serial.
func BenchmarkSampleBesidePyserial(b *testing.B) {
	if exec.Command(debianPython, "-c", "import serial").Run() != nil {
		b.Skip("python3-serial is not installed (apt-get install python3-serial)")
	}
	peer, err := filepath.Abs("../../testdata/bench/poll_pyserial.py")
	if err != nil {
		b.Fatal(err)
	}
	const baud = 115200
	roles := openBench(b, 0, baud)
	s, err := New(roles, time.Now())
	if err != nil {
		b.Fatal(err)
	}
	defer s.Close()
	paths := serveBench(b, 0, baud)
	py := func() time.Duration {
		var so, se bytes.Buffer
		cmd := exec.Command(debianPython, peer, strconv.Itoa(baud), strconv.Itoa(pairSamples), paths[0], paths[1], paths[2])
		cmd.Stdout, cmd.Stderr = &so, &se
		if err := cmd.Run(); err != nil {
			b.Fatalf("peer: %v\n%s", err, se.Bytes())
		}
		sec, err := strconv.ParseFloat(strings.TrimSpace(so.String()), 64)
		if err != nil {
			b.Fatalf("peer printed %q", so.String())
		}
		return time.Duration(sec * float64(time.Second))
	}
	rate := inPairs(b, "sampler", "pyserial",
		func() time.Duration {
			return turn(b, func(ctx context.Context) error { _, err := s.Read(ctx); return err })
		}, py)
	nom, emu := lineLimit(b, baud)
	b.ReportMetric(100*rate/emu, "line-%")
	b.ReportMetric(100*rate/nom, "nominal-line-%")
}
