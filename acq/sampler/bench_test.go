package sampler

import (
	"context"
	"fmt"
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
func openBench(b *testing.B, delay time.Duration) Roles {
	b.Helper()
	ctx := context.Background()
	o := profile.Options{Log: slog.New(slog.DiscardHandler)}
	serve := func(id string) string {
		p, err := linktest.Open()
		if err != nil {
			b.Skipf("no ptys: %v", err)
		}
		r := linktest.Serve(p, "\n", "\n", delay, answer(id))
		b.Cleanup(func() { r.Stop(); p.Close() })
		return p.Path
	}
	sup, err := profile.OpenSupply(ctx, profile.Spec{Port: serve("HYSTD-SIM,BIPOLAR-SUPPLY"), Profile: "sim-supply"}, o)
	if err != nil {
		b.Fatal(err)
	}
	integ, err := profile.OpenIntegrator(ctx, profile.Spec{Port: serve("HYSTD-SIM,FLUX-INTEGRATOR"), Profile: "sim-integrator"}, o)
	if err != nil {
		b.Fatal(err)
	}
	fm, err := profile.OpenFieldMeter(ctx, profile.Spec{Port: serve("HYSTD-SIM,HALL-METER"), Profile: "sim-fieldmeter"}, o)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { sup.Close(); integ.Close(); fm.Close() })
	return Roles{Supply: sup, Integrator: integ, FieldMeter: fm}
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

// BenchmarkSample: samples per second for three instruments on three ptys,
// read concurrently by the Sampler versus one after another.
func BenchmarkSample(b *testing.B) {
	for _, delay := range []time.Duration{0, time.Millisecond} {
		b.Run(fmt.Sprintf("concurrent/reply-delay=%v", delay), func(b *testing.B) {
			roles := openBench(b, delay)
			s, err := New(roles, time.Now())
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			ctx := context.Background()
			b.ResetTimer()
			for b.Loop() {
				if _, err := s.Read(ctx); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "samples/s")
		})
		b.Run(fmt.Sprintf("sequential/reply-delay=%v", delay), func(b *testing.B) {
			roles := openBench(b, delay)
			ctx := context.Background()
			b.ResetTimer()
			for b.Loop() {
				if err := readSequential(ctx, roles); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "samples/s")
		})
	}
}
