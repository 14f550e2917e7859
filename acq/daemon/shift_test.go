package daemon

import (
	"context"
	"strings"
	"testing"
	"time"

	"hystd/acq/fixture/fixturetest"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/configs"
	"hystd/drivers/instr"
	"hystd/drivers/sim"
)

// coarseLoop steps the field by 200 A/m per sample (4 kA/m over 20 points;
// 0.14 A on the demo ring's 141.4 mm mean path with 200 turns; 0.25 mT at
// the probe, twelve times its noise), so that a channel one sample behind
// is unmistakable, while the jump after an 800 ms stall (480 A/m, 0.34 A)
// still settles within the supply's 4 ms settle time at its 100 A/s slew.
const coarseLoop = `kind: recipe
name: coarse-loop
steps:
  - record_loop: {amplitude: 1 kA/m, rate: 600 A/m/s, points: 20, hold: 300ms}
`

// TestLateReplyNoShiftedSample: the field meter holds one reply back for
// 800 ms (beyond its timeout) in the middle of a sweep (at 4 s of bench
// time: coarseLoop's sweep spans about 2–8.6 s). In simulated time the
// client's read times out and the held reply comes out before the reply
// to its next command (drivers/sim TestLateReplyInSimulatedTime), the
// order that shifted a channel before. The late
// reply is discarded when the line is resynchronised and the reading taken
// again: no stored sample has its field one step behind (before, the
// channel stayed one reading behind for the rest of the run).
func TestLateReplyNoShiftedSample(t *testing.T) {
	for _, role := range []string{instr.RoleFieldMeter, instr.RoleSupply} {
		t.Run(role, func(t *testing.T) { lateReply(t, role) })
	}
}

func lateReply(t *testing.T, role string) {
	bd := benchFiles(t, nil, sim.Fault{Role: role, Kind: sim.FaultDelay, Delay: configs.Duration(800 * time.Millisecond), At: benchAt(4 * time.Second)})
	bd.serve(t)
	id, err := bd.runner.Submit(context.Background(), "", []byte(coarseLoop))
	if err != nil {
		t.Fatal(err)
	}
	var r record.Run
	waitFor(t, "the run's ending", 60*time.Second, func() bool {
		st, err := store.Open(context.Background(), bd.db)
		if err != nil {
			return false
		}
		defer st.Close()
		r, _ = st.Run(context.Background(), id)
		return r.State != record.Queued && r.State != record.Running
	})
	zeroWithin(t, bd.bench, time.Second)
	if r.State != record.Finished {
		t.Fatalf("run %s: %s", r.State, r.Reason)
	}
	if n := bd.bench.Injected()[sim.FaultDelay]; n != 1 {
		t.Fatalf("delay faults fired: %d", n)
	}
	_, loops := bd.run(t, id)
	if len(loops) != 1 {
		t.Fatalf("%d loops", len(loops))
	}
	st, _ := store.Open(context.Background(), bd.db)
	defer st.Close()
	l, err := st.Loop(context.Background(), id, 1)
	if err != nil || len(l.Raw) < 15 {
		t.Fatalf("loop 1: %d raw samples, %v", len(l.Raw), err)
	}
	nI, nB := fixturetest.ShiftedSamples(l.Raw, 0.002, 1e-4)
	if nI > 0 || nB > 0 {
		t.Errorf("%d samples with the current, %d with the field, out of step (of %d)", nI, nB, len(l.Raw))
	}
	evs, _ := st.Events(context.Background(), id)
	seen := false
	for _, e := range evs {
		seen = seen || strings.Contains(e.Text, "late replies were read again")
	}
	if !seen {
		t.Errorf("the late reply left no event: %+v", evs)
	}
}

// benchAt is a fault trigger at d of bench time. In simulated time the
// bench's clock stands still until the daemon runs, and a run starts at
// once, so d places the fault at a fixed point of the recipe.
func benchAt(d time.Duration) *configs.Duration {
	c := configs.Duration(d)
	return &c
}
