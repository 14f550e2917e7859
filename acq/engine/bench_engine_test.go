package engine

import (
	"context"
	"log/slog"
	"testing"

	"hystd/acq/config"
	"hystd/acq/engine/enginetest"
	"hystd/acq/recipe"
	"hystd/acq/record"
)

// BenchmarkEngineSample measures the engine's own cost per sample (set,
// concurrent read of two channels, stamping, safety checks, recording) on
// instant fake instruments, so that it can be compared with what a serial
// line allows (about 1 ms per query at 115200 Bd): it should be a small
// fraction of that.
func BenchmarkEngineSample(b *testing.B) {
	fx, err := config.LoadFixture("../../configs/fixture-ring-bench.yaml")
	if err != nil {
		b.Fatal(err)
	}
	sp, err := config.LoadSpecimen("../../configs/specimen-ring-r17.yaml")
	if err != nil {
		b.Fatal(err)
	}
	rc, err := recipe.Parse("bench.yaml", []byte("kind: recipe\nname: bench\nsteps:\n  - record_loop: {amplitude: 1 A, rate: 4 A/s, points: 10000, hold: 100ms}\n"))
	if err != nil {
		b.Fatal(err)
	}
	log := slog.New(slog.DiscardHandler)
	samples := 0
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		clk := enginetest.NewClock()
		sup := enginetest.NewSupply(clk)
		w := enginetest.NewWriter()
		_, err := Run(context.Background(), Setup{Fixture: fx, Specimen: sp, Recipe: rc, Writer: w, Clock: clk, Log: log,
			Instruments: Instruments{Supply: sup, Integrator: &enginetest.Integrator{Sup: sup, K: 1e-3, ZeroAt: clk.Now()}},
			Process:     func([]record.Sample, recipe.LoopInfo) (Processed, error) { return Processed{}, nil }})
		if err != nil {
			b.Fatal(err)
		}
		samples += len(w.Loops[0].Raw)
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(samples), "ns/sample")
}

// BenchmarkExpand expands the normal-curve sample recipe.
func BenchmarkExpand(b *testing.B) {
	fx, err := config.LoadFixture("../../configs/fixture-ring-bench.yaml")
	if err != nil {
		b.Fatal(err)
	}
	sp, err := config.LoadSpecimen("../../configs/specimen-ring-r17.yaml")
	if err != nil {
		b.Fatal(err)
	}
	g, err := recipe.GeometryOf(fx, sp)
	if err != nil {
		b.Fatal(err)
	}
	rc, err := recipe.Load("../../configs/recipes/ring-normal-curve.yaml")
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for range b.N {
		if _, err := recipe.Expand(rc, fx, g); err != nil {
			b.Fatal(err)
		}
	}
}
