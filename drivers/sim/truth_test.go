package sim

import (
	"context"
	"strings"
	"testing"
	"time"

	"hystd/configs"
	"hystd/drivers/instr"
)

// realBench starts the demo bench on the wall clock (delays are real).
func realBench(t *testing.T) *Bench {
	t.Helper()
	cfg, err := DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	b, err := Start(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	return b
}

// The bench keeps what a real line keeps when its client goes away: a
// reply not read before the port was closed, and a late reply sent after
// it was closed, both wait on the line for the next process to open it.
func TestStaleLineSurvivesReopen(t *testing.T) {
	tests := []struct {
		name  string
		fault *Fault
	}{
		{"reply not read before close", nil},
		{"reply sent after close", &Fault{Role: instr.RoleFieldMeter, Kind: FaultDelay, Delay: configs.Duration(200 * time.Millisecond)}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			b := realBench(t)
			if tc.fault != nil {
				if err := b.Inject(*tc.fault); err != nil {
					t.Fatal(err)
				}
			}
			c := dial(t, b.Ports()[instr.RoleFieldMeter])
			if err := c.send("MEAS:FIEL?"); err != nil {
				t.Fatal(err)
			}
			c.port.Close()
			time.Sleep(400 * time.Millisecond)
			c2 := dial(t, b.Ports()[instr.RoleFieldMeter])
			l, err := c2.readLine(time.Second)
			if err != nil || !strings.Contains(l, "E") {
				t.Fatalf("the next opener found %q, %v; want the stale field reading", l, err)
			}
			if tc.fault != nil && b.Injected()[FaultDelay] != 1 {
				t.Errorf("injected %v", b.Injected())
			}
		})
	}
}

func TestInjectChecksFaults(t *testing.T) {
	b := realBench(t)
	for _, f := range []Fault{
		{Role: instr.RoleIntegrator, Kind: FaultTrip},
		{Role: "oven", Kind: FaultDrop},
		{Role: instr.RoleSupply, Kind: "melt"},
		{Role: instr.RoleSupply, Kind: FaultDelay},
	} {
		if err := b.Inject(f); err == nil {
			t.Errorf("%+v accepted", f)
		}
	}
	if err := b.Inject(Fault{Role: instr.RoleFieldMeter, Kind: FaultError, Code: -310, Message: "probe"}); err != nil {
		t.Fatal(err)
	}
	c := dial(t, b.Ports()[instr.RoleFieldMeter])
	if r := c.query("SYST:ERR?"); r != `-310,"probe"` {
		t.Errorf("error queue after an injected error: %q", r)
	}
	if r := b.Report(); r.Faults[FaultError] != 1 || r.Faults[FaultDrop] != 0 {
		t.Errorf("report faults %v", r.Faults)
	}
}
