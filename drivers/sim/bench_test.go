package sim

import (
	"math"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/calib/units"
	"hystd/drivers/instr"
)

func num(t *testing.T, s string) float64 {
	t.Helper()
	v, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
	if err != nil {
		t.Fatalf("reply %q is not a number: %v", s, err)
	}
	return v
}

// TestCommonsAndErrorQueue checks IEEE 488.2 common commands and the SCPI
// error queue (IEEE 488.2 §10, SCPI-99 §21.8 codes and messages).
func TestCommonsAndErrorQueue(t *testing.T) {
	b, _ := startBench(t, demoBench(t))
	for role, path := range b.Ports() {
		c := dial(t, path)
		id := c.query("*IDN?")
		if f := fields(id); len(f) != 4 || f[0] != "HYSTD-SIM" {
			t.Errorf("%s: *IDN? = %q, want four fields from HYSTD-SIM", role, id)
		}
		if r := c.query("SYST:ERR?"); r != `0,"No error"` {
			t.Errorf("%s: SYST:ERR? = %q", role, r)
		}
		if r := c.query("*OPC?"); r != "1" {
			t.Errorf("%s: *OPC? = %q", role, r)
		}
		c.write("BOGUS:CMD 3")
		if r := c.query("*STB?"); r != "68" { // EAV (bit 2) + MSS (bit 6)
			t.Errorf("%s: *STB? with an error queued = %q, want 68", role, r)
		}
		if r := c.query("SYST:ERR?"); r != `-113,"Undefined header"` {
			t.Errorf("%s: after bogus command: %q", role, r)
		}
		if r := c.query("*ESR?"); r != "160" { // PON (bit 7) + CME (bit 5)
			t.Errorf("%s: *ESR? = %q, want 160", role, r)
		}
		if r := c.query("*ESR?"); r != "0" {
			t.Errorf("%s: *ESR? must clear: %q", role, r)
		}
		for i := 0; i < 12; i++ {
			c.write("NOPE")
		}
		var last string
		for i := 0; i < 10; i++ {
			last = c.query("SYST:ERR?")
		}
		if last != `-350,"Queue overflow"` {
			t.Errorf("%s: 10th entry after 12 errors = %q, want -350", role, last)
		}
		if r := c.query("SYST:ERR?"); r != `0,"No error"` {
			t.Errorf("%s: queue not empty after overflow: %q", role, r)
		}
		if r := c.query("*CLS;*OPC?"); r != "1" {
			t.Errorf("%s: compound line: %q", role, r)
		}
	}
}

// TestSupplyFollowsPort drives the supply through its port and compares
// replies with the truth: slew-limited ramp (100 A/s), H = N1·I/l_m
// (Ampère's law on the mean path π·(D+d)/2, IEC 60404-4), voltage R·I.
func TestSupplyFollowsPort(t *testing.T) {
	b, clk := startBench(t, quiet(t))
	c := dial(t, b.Ports()[instr.RoleSupply])
	c.write("SOUR:CURR 2.0")
	c.write("OUTP ON")
	if r := c.query("SYST:ERR?"); r != `0,"No error"` {
		t.Fatalf("after settings: %q", r)
	}
	clk.Advance(10 * time.Millisecond)
	if i := num(t, c.query("MEAS:CURR?")); math.Abs(i-1.0) > 1e-9 {
		t.Errorf("after 10 ms at 100 A/s: I = %g A, want 1.0", i)
	}
	clk.Advance(time.Second)
	i := num(t, c.query("MEAS:CURR?"))
	v := num(t, c.query("MEAS:VOLT?"))
	tr := b.Truth()
	if math.Abs(i-2) > 1e-5 || math.Abs(float64(tr.I)-2) > 1e-9 {
		t.Errorf("I = %g (truth %g), want 2", i, tr.I)
	}
	if want := 2 * tr.Resistance; math.Abs(v-want) > 1e-5 {
		t.Errorf("V = %g, want R·I = %g", v, want)
	}
	if want := 200 * 2 / (math.Pi * 0.045); math.Abs(float64(tr.H)-want) > 1e-6 {
		t.Errorf("truth H = %g, want %g", tr.H, want)
	}
	if st := c.query("STAT:QUES:COND?"); st != "8" { // output (bit 3)
		t.Errorf("status = %q, want 8 (output on)", st)
	}
	c.write("SOUR:CURR 50")
	if r := c.query("SYST:ERR?"); r != `-222,"Data out of range"` {
		t.Errorf("50 A setpoint: %q", r)
	}
	c.write("SOUR:CURR abc")
	if r := c.query("SYST:ERR?"); r != `-104,"Data type error"` {
		t.Errorf("text setpoint: %q", r)
	}
	c.write("SOUR:CURR")
	if r := c.query("SYST:ERR?"); r != `-109,"Missing parameter"` {
		t.Errorf("no setpoint: %q", r)
	}
	c.write("*RST")
	clk.Advance(time.Second)
	if tr := b.Truth(); tr.I != 0 || tr.Output {
		t.Errorf("after *RST: I = %g, output %v", tr.I, tr.Output)
	}
	if h := b.History(); len(h) < 2000 || h[len(h)-1].T != tr.T+time.Second {
		t.Errorf("history: %d samples, last at %v", len(h), h[len(h)-1].T)
	}
}

// TestSensorsFollowTruth: with sensor errors off, the integrator returns
// ψ = N2·B·A (coil tight on the ring) and the field meter μ0·H.
func TestSensorsFollowTruth(t *testing.T) {
	b, clk := startBench(t, quiet(t))
	p := b.Ports()
	sup, integ, fm, th := dial(t, p[instr.RoleSupply]), dial(t, p[instr.RoleIntegrator]), dial(t, p[instr.RoleFieldMeter]), dial(t, p[instr.RoleThermometer])
	integ.write("INT:RES")
	sup.write("SOUR:CURR 1.5")
	sup.write("OUTP ON")
	clk.Advance(2 * time.Second)
	tr := b.Truth()
	psi := num(t, integ.query("FETC:FLUX?"))
	if want := 100 * float64(tr.B) * 50e-6; math.Abs(psi-want) > 1e-6*math.Abs(want)+1e-12 {
		t.Errorf("ψ = %g, want N2·B·A = %g", psi, want)
	}
	if float64(tr.B) < 1.5 {
		t.Errorf("B = %g T at %g A/m: the demo steel should be past 1.5 T", tr.B, tr.H)
	}
	bp := num(t, fm.query("MEAS:FIEL?"))
	if want := units.Mu0 * float64(tr.H); math.Abs(bp-want) > 1e-6*want {
		t.Errorf("probe = %g T, want μ0·H = %g", bp, want)
	}
	temp := num(t, th.query("MEAS:TEMP?"))
	if math.Abs(temp-float64(tr.Temp)) > 1e-5 || temp <= 23 {
		t.Errorf("temperature %g, truth %g (ambient 23, heating)", temp, tr.Temp)
	}
	if r := integ.query("INT:OVER?"); r != "0" {
		t.Errorf("overload = %q", r)
	}
	integ.write("INT:RANG 1.000E-04")
	clk.Advance(time.Millisecond)
	if r := integ.query("INT:OVER?"); r != "1" {
		t.Errorf("after shrinking the range: overload = %q, want 1", r)
	}
	fm.write("FIEL:RANG 1.000E-02")
	if r := fm.query("SYST:ERR?"); r != `0,"No error"` {
		t.Fatal(r)
	}
	sup.write("SOUR:CURR 15")
	clk.Advance(time.Second)
	if r := fm.query("MEAS:FIEL?"); r != "9.9E37" {
		t.Errorf("over range field = %q, want the SCPI overflow value 9.9E37", r)
	}
}

// TestSupplyAnswersQueuedQueries: the simulated supply takes two queries
// written back to back, before either reply is read, and answers them in
// order on its pty (what sim-supply's queued_queries: 2 declares). With
// the current held at 2 A the two replies differ (V = R·I, R of the
// winding from the bench's truth), so an answer out of order would show.
func TestSupplyAnswersQueuedQueries(t *testing.T) {
	b, clk := startBench(t, quiet(t))
	c := dial(t, b.Ports()[instr.RoleSupply])
	c.write("SOUR:CURR 2.0")
	c.write("OUTP ON")
	clk.Advance(time.Second)
	for k := range 3 {
		if _, err := c.port.Write([]byte("MEAS:CURR?\nMEAS:VOLT?\n")); err != nil {
			t.Fatal(err)
		}
		var got [2]float64
		for j := range got {
			r, err := c.readLine(2 * time.Second)
			if err != nil {
				t.Fatalf("round %d, reply %d: %v", k, j, err)
			}
			got[j] = num(t, r)
		}
		tr := b.Truth()
		if math.Abs(got[0]-float64(tr.I)) > 1e-5 || math.Abs(got[1]-float64(tr.I)*tr.Resistance) > 1e-5 {
			t.Fatalf("round %d: replies %v, want I = %g A then V = R·I = %g V", k, got, tr.I, float64(tr.I)*tr.Resistance)
		}
	}
}
