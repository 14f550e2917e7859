package sim

import (
	"bytes"
	"hystd/drivers/clock"
	"hystd/drivers/instr"
	"math"
	"os"
	"strings"
	"testing"
	"time"
)

// TestServesAnyProfile: a supply profile in another dialect (CR LF, mA
// scale, worded states, reply with unit, field-indexed reply, own error
// query) is served by its templates.
func TestServesAnyProfile(t *testing.T) {
	data, err := os.ReadFile("../../configs/bench-demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	data = bytes.Replace(data, []byte("supply:      {profile: sim-supply}"), []byte("supply:      {profile: testdata/dialect-supply.yaml}"), 1)
	cfg, err := ParseBench("dialect-bench.yaml", data)
	if err != nil {
		t.Fatal(err)
	}
	cfg = withoutNoise(cfg)
	b, clk := startBench(t, cfg)
	c := dial(t, b.Ports()[instr.RoleSupply])
	ask := func(cmd string) string {
		t.Helper()
		if err := c.send(cmd + "\r"); err != nil { // with the "\n" of send: CR LF
			t.Fatal(err)
		}
		r, err := c.readLine(2 * time.Second)
		if err != nil {
			t.Fatalf("%s: %v", cmd, err)
		}
		return strings.TrimSuffix(r, "\r")
	}
	if id := ask("*IDN?"); len(fields(id)) != 4 || !strings.HasPrefix(id, "TESTWORKS,SUPPLY,") {
		t.Errorf("*IDN? = %q", id)
	}
	ask("ISET 1500.0;STATE DRIVE;*OPC?")
	if r := ask("ERR:NEXT?"); r != `0,"No error"` {
		t.Fatalf("error query: %q", r)
	}
	clk.Advance(time.Second)
	if r := ask("IOUT?"); r != "1.500000E+00 A" {
		t.Errorf("IOUT? = %q, want 1.5 A with unit (the query has no scale)", r)
	}
	if tr := b.Truth(); tr.I != 1.5 {
		t.Errorf("truth I = %g A, want 1.5 (1500 mA)", tr.I)
	}
	if f := fields(ask("VOUT?")); len(f) != 2 || f[0] != "0" || math.Abs(num(t, f[1])-1.5*b.Truth().Resistance) > 1e-5 {
		t.Errorf("VOUT? fields %q, want status 0 and R·I in field 2", f)
	}
	if r := ask("COND?"); r != "1" {
		t.Errorf("COND? = %q, want 1 (output on bit 0)", r)
	}
	ask("ISET 9000;*OPC?")
	if r := ask("ERR:NEXT?"); r != `-222,"Data out of range"` {
		t.Errorf("9 A on a 5 A profile range: %q", r)
	}
	ask("STATE MAYBE;*OPC?")
	if r := ask("ERR:NEXT?"); r != `-104,"Data type error"` {
		t.Errorf("unknown state word: %q", r)
	}
}

// TestKeepsServingAfterClientLeaves: a client closing the port (the
// bench's own slave fd stays open) does not stop the instrument.
func TestKeepsServingAfterClientLeaves(t *testing.T) {
	b, _ := startBench(t, demoBench(t))
	path := b.Ports()[instr.RoleIntegrator]
	for i := 0; i < 3; i++ {
		c := dial(t, path)
		if id := c.query("*IDN?"); len(fields(id)) != 4 {
			t.Fatalf("round %d: %q", i, id)
		}
		c.port.Close()
	}
}

func withoutNoise(c Config) Config {
	c.Integrator.NoiseWb, c.FieldMeter.NoiseT, c.Thermometer.NoiseC = 0, 0, 0
	return c
}

// BenchmarkQueryRoundTrip measures one query and reply over a simulated
// port (pty, SCPI matching, physics advance): the bench must not be what
// limits the sample rate.
func BenchmarkQueryRoundTrip(b *testing.B) {
	cfg, err := DefaultBench()
	if err != nil {
		b.Fatal(err)
	}
	clk := clock.NewManual(time.Unix(0, 0))
	bench, err := Start(b.Context(), cfg, WithClock(clk))
	if err != nil {
		b.Fatal(err)
	}
	defer bench.Close()
	c := dial(b, bench.Ports()[instr.RoleIntegrator])
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		clk.Advance(time.Millisecond)
		if err := c.send("FETC:FLUX?"); err != nil {
			b.Fatal(err)
		}
		if _, err := c.readLine(time.Second); err != nil {
			b.Fatal(err)
		}
	}
}
