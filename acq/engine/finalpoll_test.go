package engine

import (
	"context"
	"errors"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"hystd/acq/engine/enginetest"
	"hystd/drivers/instr"
)

// pollingSupply is the fake supply with an error queue whose poll fails
// once the supply has been halted (its line lost during the ending).
type pollingSupply struct{ *enginetest.Supply }

func (s pollingSupply) ErrorPollPeriod() time.Duration { return time.Second }
func (s pollingSupply) PollErrors(context.Context) ([]instr.InstrumentError, error) {
	if s.Halts > 0 {
		return nil, errors.New("supply line gone")
	}
	return nil, nil
}

// pollingThermometer raises an error by itself during the ending.
type pollingThermometer struct {
	*enginetest.Thermometer
	sup *enginetest.Supply
}

func (t pollingThermometer) ErrorPollPeriod() time.Duration { return time.Second }
func (t pollingThermometer) PollErrors(context.Context) ([]instr.InstrumentError, error) {
	if t.sup.Halts > 0 {
		return []instr.InstrumentError{{Code: -330, Msg: "raised during the ending"}}, nil
	}
	return nil, nil
}

// The ending's last error-queue poll goes on to the other instruments when
// one poll fails: an error the thermometer raised during the ramp-down is
// named although the supply's poll failed before it (it was left in the
// queue for the next open's *CLS to erase).
func TestFinalPollGoesOnAfterAFailure(t *testing.T) {
	r := newRig(t)
	s := r.setup(t, twoLoops)
	s.Instruments.Supply = pollingSupply{r.sup}
	s.Instruments.Thermometer = pollingThermometer{r.therm, r.sup}
	run, _ := Run(context.Background(), s)
	r.assertSafe(t)
	var named, failed bool
	for _, e := range r.w.Events {
		named = named || strings.Contains(e.Text, "raised during the ending")
		failed = failed || strings.Contains(e.Text, "supply line gone")
	}
	if !named {
		t.Errorf("the thermometer's error raised during the ending is not among the run's events (run %s %q)", run.State, run.Reason)
	}
	if !failed {
		t.Errorf("the failed supply poll is not among the run's events (run %s %q)", run.State, run.Reason)
	}
}

// reconnectingThermometer counts port reconnects, as profile.Device does.
type reconnectingThermometer struct {
	*enginetest.Thermometer
	n *atomic.Int64
}

func (t reconnectingThermometer) Reconnects() int64 { return t.n.Load() }

// A port lost and reconnected during a run is named by the run's events,
// although no operation's error reached the engine (the read that met the
// loss was retried by the driver, or failed while the run was failing on
// another instrument).
func TestReconnectNamedInEvents(t *testing.T) {
	r := newRig(t)
	s := r.setup(t, twoLoops)
	var n atomic.Int64
	n.Store(2) // reconnects before this run are not its own
	s.Instruments.Thermometer = reconnectingThermometer{r.therm, &n}
	r.sup.OnRead = func(k int) {
		if k == 40 {
			n.Add(1)
		}
	}
	run, err := Run(context.Background(), s)
	if err != nil {
		t.Fatalf("run %s: %v", run.State, err)
	}
	var named int
	for _, e := range r.w.Events {
		if strings.Contains(e.Text, "thermometer's port was lost") && strings.Contains(e.Text, "reconnected 1 time(s)") {
			named++
		}
	}
	if named != 1 {
		t.Errorf("%d events name the thermometer's reconnect, want 1", named)
	}
}

// breakingThermometer counts broken exchanges, as profile.Device does;
// one breaks inside its halt (during the ending).
type breakingThermometer struct {
	*enginetest.Thermometer
	n *atomic.Int64
}

func (t breakingThermometer) LineBreaks() int64 { return t.n.Load() }
func (t breakingThermometer) Halt(ctx context.Context) error {
	t.n.Add(1)
	return t.Thermometer.Halt(ctx)
}

// An exchange broken off during a run (a reply lost or late, whose read
// was abandoned when the run failed on another instrument, or broken
// inside the ramp-down) is named by the run's events: before, the
// campaign found such faults only in the daemon's log. Breaks before the
// run are not its own; one during the ending counts.
func TestLineBreaksNamedInEvents(t *testing.T) {
	r := newRig(t)
	s := r.setup(t, twoLoops)
	var n atomic.Int64
	n.Store(3)
	s.Instruments.Thermometer = breakingThermometer{r.therm, &n}
	r.sup.OnRead = func(k int) {
		if k == 40 {
			n.Add(1)
		}
	}
	run, err := Run(context.Background(), s)
	if err != nil {
		t.Fatalf("run %s: %v", run.State, err)
	}
	var named int
	for _, e := range r.w.Events {
		if strings.Contains(e.Text, "thermometer's line broke off 2 exchange(s)") && strings.Contains(e.Text, "resynchronised") {
			named++
		}
	}
	if named != 1 {
		t.Errorf("%d events name the thermometer's 2 broken exchanges, want 1", named)
	}
}
