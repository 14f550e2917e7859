package sampler

import (
	"context"
	"log/slog"
	"testing"
	"time"

	"hystd/drivers/link/linktest"
	"hystd/drivers/profile"
)

// answer is a minimal stand-in for the simulated bench's sim dialect.
func answer(id string) linktest.Handler {
	return func(cmd string) (string, bool) {
		switch cmd {
		case "*IDN?":
			return id, true
		case "SYST:ERR?":
			return `0,"No error"`, true
		case "MEAS:CURR?":
			return "+1.234560E+00", true
		case "MEAS:VOLT?":
			return "+9.876540E-01", true
		case "FETC:FLUX?":
			return "-2.468000E-04", true
		case "MEAS:FIEL?":
			return "+1.500000E-01", true
		}
		return "", false
	}
}

// openBench opens supply, integrator and field meter on three ptys whose
// responders wait delay before each reply (the instrument's processing time).
func openBench(b *testing.B, delay time.Duration, baud int) Roles {
	b.Helper()
	ctx := context.Background()
	o := profile.Options{Log: slog.New(slog.DiscardHandler)}
	paths := serveBench(b, delay, baud)
	sup, err := profile.OpenSupply(ctx, profile.Spec{Port: paths[0], Profile: "sim-supply"}, o)
	if err != nil {
		b.Fatal(err)
	}
	integ, err := profile.OpenIntegrator(ctx, profile.Spec{Port: paths[1], Profile: "sim-integrator"}, o)
	if err != nil {
		b.Fatal(err)
	}
	fm, err := profile.OpenFieldMeter(ctx, profile.Spec{Port: paths[2], Profile: "sim-fieldmeter"}, o)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { sup.Close(); integ.Close(); fm.Close() })
	return Roles{Supply: sup, Integrator: integ, FieldMeter: fm}
}

// serveBench starts the supply's, integrator's and field meter's responders
// on three ptys and returns the paths a client opens, in that order.
func serveBench(b *testing.B, delay time.Duration, baud int) [3]string {
	var paths [3]string
	for k, id := range []string{"HYSTD-SIM,BIPOLAR-SUPPLY", "HYSTD-SIM,FLUX-INTEGRATOR", "HYSTD-SIM,HALL-METER"} {
		p, err := linktest.Open()
		if err != nil {
			b.Skipf("no ptys: %v", err)
		}
		r := linktest.ServeLine(p, "\n", "\n", delay, baud, answer(id))
		b.Cleanup(func() { r.Stop(); p.Close() })
		paths[k] = p.Path
	}
	return paths
}

// readSequential reads the same channels one after another, as a polling
// script would: the baseline for the concurrent sampler.
func readSequential(ctx context.Context, r Roles) error {
	if _, err := r.Supply.ReadCurrent(ctx); err != nil {
		return err
	}
	if _, err := r.Supply.ReadVoltage(ctx); err != nil {
		return err
	}
	if _, err := r.Integrator.ReadFlux(ctx); err != nil {
		return err
	}
	_, err := r.FieldMeter.ReadField(ctx)
	return err
}

// lineLimit is the sample rate the serial lines allow at baud for a
// client that writes each port's reads back to back as far as its
// profile's queued_queries allows (the Sampler; the pyserial script and
// reading in turn ask one at a time, which takes longer): the ports work
// in parallel, so it is set by the port with the most line time per
// sample. A port's time is that of its groups of queued reads on a
// full-duplex linktest.Timeline (commands on one line, replies on the
// other, each 10 bits a character, terminators included), each group
// asked once the previous one's replies are in. nominal uses the exact
// line times; emulated measures what the pty responder's writer really
// takes on this machine, sleeping until each reply's time (timers here
// round a sleep up to the next millisecond or so), which is the line the
// benchmark runs on.
func lineLimit(b *testing.B, baud int) (nominal, emulated float64) {
	var worstNom, worstEmu time.Duration
	for name, ops := range map[string][]string{
		"sim-supply":     {profile.OpReadCurrent, profile.OpReadVoltage},
		"sim-integrator": {profile.OpReadFlux},
		"sim-fieldmeter": {profile.OpReadField},
	} {
		p, err := profile.Load(name)
		if err != nil {
			b.Fatal(err)
		}
		var cmds, replies []int
		for _, op := range ops {
			q := p.Operations[op].Query
			reply, _ := answer("")(q)
			cmds = append(cmds, len(q)+len(p.Terminators.Write))
			replies = append(replies, len(reply)+len(p.Terminators.Read))
		}
		nom := portTime(baud, p.Queued(), cmds, replies, func(time.Time) {})
		const n = 20
		t0 := time.Now()
		for range n {
			portTime(baud, p.Queued(), cmds, replies, func(at time.Time) { time.Sleep(time.Until(at)) })
		}
		worstNom, worstEmu = max(worstNom, nom), max(worstEmu, time.Since(t0)/n)
	}
	return 1 / worstNom.Seconds(), 1 / worstEmu.Seconds()
}

// portTime is one sample's time on one port: its reads (command and reply
// lengths) in groups of queued, on a Timeline starting now; reply is
// called with each reply's time, in order (the responder's writer sleeps
// until it).
func portTime(baud, queued int, cmds, replies []int, reply func(at time.Time)) time.Duration {
	t0 := time.Now()
	at := t0
	for k := 0; k < len(cmds); k += queued {
		line := linktest.Timeline{Baud: baud}
		group := min(len(cmds), k+queued)
		var in []time.Time
		for j := k; j < group; j++ {
			in = append(in, line.Command(at, cmds[j]))
		}
		for j := k; j < group; j++ {
			at = line.Reply(in[j-k], replies[j])
			reply(at)
		}
		if now := time.Now(); now.After(at) {
			at = now // the next group is asked once this one's replies are read
		}
	}
	return at.Sub(t0)
}

// BenchmarkSample: samples per second for three instruments on three ptys,
// read concurrently by the Sampler versus one after another: with no delay,
// with a 1 ms processing time per reply, and on emulated 115 200 Bd lines,
// where line-% is the achieved rate as a percentage of what the emulated
// lines allow a client that queues as the profiles permit (see lineLimit;
// reading in turn cannot reach it) and nominal-line-% the same against the
// exact line times.
func BenchmarkSample(b *testing.B) {
	cases := []struct {
		name  string
		delay time.Duration
		baud  int
	}{
		{"reply-delay=0", 0, 0},
		{"reply-delay=1ms", time.Millisecond, 0},
		{"line=115200Bd", 0, 115200},
	}
	for _, c := range cases {
		report := func(b *testing.B) {
			rate := float64(b.N) / b.Elapsed().Seconds()
			b.ReportMetric(rate, "samples/s")
			if c.baud > 0 {
				nom, emu := lineLimit(b, c.baud)
				b.ReportMetric(100*rate/emu, "line-%")
				b.ReportMetric(100*rate/nom, "nominal-line-%")
			}
		}
		b.Run("concurrent/"+c.name, func(b *testing.B) {
			roles := openBench(b, c.delay, c.baud)
			s, err := New(roles, time.Now())
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			ctx := context.Background()
			for b.Loop() {
				if _, err := s.Read(ctx); err != nil {
					b.Fatal(err)
				}
			}
			report(b)
		})
		b.Run("sequential/"+c.name, func(b *testing.B) {
			roles := openBench(b, c.delay, c.baud)
			ctx := context.Background()
			for b.Loop() {
				if err := readSequential(ctx, roles); err != nil {
					b.Fatal(err)
				}
			}
			report(b)
		})
	}
}
