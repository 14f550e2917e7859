package recipe

import (
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
)

// TestBounds: recipes beyond the bounds are refused with file, line and
// step, before any duration can overflow. time.Duration holds at most
// 2562047h47m16.854775807s (2^63−1 ns, the Go documentation of
// time.Duration), so "2562047h" is the largest whole-hour duration that
// parses, and any sum of it with another duration overflows.
func TestBounds(t *testing.T) {
	const head = "kind: recipe\nname: x\nsteps:\n"
	tests := []struct {
		name, src string
		want      []string
		expand    bool // the refusal comes from Expand (needs the fixture)
	}{
		{"vanishing rate", head + "  - record_loop: {amplitude: 1 kA/m, rate: 1e-300 A/m/s, points: 100}\n",
			[]string{"x.yaml:4: steps.0.record_loop.rate: 1e-300 A/m/s is outside 1e-06 to 1e+09 A/m/s"}, false},
		{"huge rate", head + "  - condition: {amplitude: 1 A, rate: 1e12 A/s}\n",
			[]string{"x.yaml:4: steps.0.condition.rate: 1e+06 MA/s is outside"}, false},
		{"hold of 2562047h", head + "  - record_loop: {amplitude: 1 kA/m, rate: 1 kA/m/s, points: 100, hold: 2562047h}\n",
			[]string{"x.yaml:4: steps.0.record_loop.hold: must be 100ms to 1h", "got 2562047h0m0s"}, false},
		{"wait of 2562047h", head + "  - wait: {duration: 2562047h}\n",
			[]string{"x.yaml:4: steps.0.wait.duration: 2562047h0m0s is longer than the 168h a wait may last"}, false},
		{"drift hold of 1000h", head + "  - drift_hold: {duration: 1000h}\n",
			[]string{"x.yaml:4: steps.0.drift_hold.duration: required: 100ms to 24h"}, false},
		{"sample interval of an hour", head + "  - record_loop: {amplitude: 1 A, rate: 1 A/s, sample_interval: 1h}\n",
			[]string{"x.yaml:4: steps.0.record_loop.sample_interval: must be 1ms to 1m"}, false},
		{"level of 1e300 A", head + "  - condition: {amplitude: 1e300 A, rate: 1 A/s}\n",
			[]string{"x.yaml:4: steps.0.condition.amplitude:", "is beyond the 1e+08 A any level may have"}, false},
		{"points beyond a million", head + "  - record_loop: {amplitude: 1 A, rate: 1 A/s, points: 2000000}\n",
			[]string{"x.yaml:4: steps.0.record_loop.points: must be 10 to 1000000 per sweep"}, false},
		{"one ramp of 1e8 s", head + "  - record_loop: {amplitude: 1 kA/m, rate: 1e-5 A/m/s, points: 100}\n",
			[]string{"x.yaml:4: steps.0.record_loop.rate: step steps.0.record_loop ramps from 0 A to", "longer than the 24h one ramp may take"}, true},
		{"plan longer than a week", head + "  - wait: {duration: 100h}\n  - wait: {duration: 100h}\n",
			[]string{"x.yaml:3: steps: the plan lasts 200h0m0s, longer than the 168h a recipe may take"}, true},
		{"dense long loop", head + "  - record_loop: {amplitude: 1 kA/m, rate: 1 A/m/s, sample_interval: 1ms}\n",
			[]string{"x.yaml:4: steps.0.record_loop:", "records 4e+06 samples", "more than the 2500000 one loop may hold"}, true},
		{"endless demagnetization", head + "  - demagnetize: {from: 1 MA/m, down_to: 1 mA/m, ratio: 0.98, rate: 10 kA/m/s}\n",
			[]string{"x.yaml:4: steps.0.demagnetize.down_to:", "1.03e+03 reversals, more than 1000"}, true},
		{"too many ramps", head + strings.Repeat("  - condition: {amplitude: 1 A, rate: 50 A/s, cycles: 1000}\n", 150),
			[]string{"x.yaml:3: steps: the plan expands to more than 200000 ramps and holds"}, true},
		{"too many steps", head + strings.Repeat("  - wait: {duration: 1s}\n", MaxSteps+1),
			[]string{"x.yaml:3: steps: 1001 steps, more than the 1000 a recipe may have"}, false},
		{"larger than 1 MiB", head + strings.Repeat("  - wait: {duration: 1s}\n", 50_000),
			[]string{"x.yaml: 1250028 bytes, larger than the 1048576 bytes (1 MiB) a recipe may have"}, false},
	}
	fx, g := ringFixture(t)
	fx.Limits.MaxCurrentA, fx.Limits.MaxSlewAPerS = 0, 0 // the bounds, not the fixture, must refuse
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r, err := Parse("x.yaml", []byte(tc.src))
			if tc.expand {
				if err != nil {
					t.Fatalf("refused already by Parse: %v", err)
				}
				_, err = Expand(r, fx, g)
			}
			if err == nil {
				t.Fatal("accepted")
			}
			for _, w := range tc.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error:\n%v\nwant it to contain:\n%s", err, w)
				}
			}
		})
	}
}

// TestHugeRecipeRefusedCheaply: a recipe file of two million steps (about
// 50 MB) is refused by its size before it is parsed; the refusal allocates
// well under a megabyte where parsing would take gigabytes.
func TestHugeRecipeRefusedCheaply(t *testing.T) {
	p := filepath.Join(t.TempDir(), "huge.yaml")
	f, err := os.Create(p)
	if err != nil {
		t.Fatal(err)
	}
	line := []byte("  - wait: {duration: 1s}\n")
	buf := append([]byte("kind: recipe\nname: huge\nsteps:\n"), []byte(strings.Repeat(string(line), 2_000_000))...)
	if _, err := f.Write(buf); err != nil {
		t.Fatal(err)
	}
	f.Close()
	buf = nil
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	_, err = Load(p)
	runtime.ReadMemStats(&after)
	if err == nil || !strings.Contains(err.Error(), "larger than the 1 MiB") {
		t.Fatalf("got %v, want a refusal by size", err)
	}
	if got := after.TotalAlloc - before.TotalAlloc; got > 1<<20 {
		t.Errorf("refusing allocated %d bytes, want < 1 MiB", got)
	}
}

// Benchmarks of refusing oversized recipes, beside their peer, parsing the
// sample recipe ring-soft-loop.yaml. DEVELOPERS.md lists the figures.

func BenchmarkParseSampleRecipe(b *testing.B) {
	data, err := os.ReadFile("../../configs/recipes/ring-soft-loop.yaml")
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Parse("ring-soft-loop.yaml", data); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkRefuseTwoMillionSteps: the 2 M-step recipe (50 MB) as a body.
func BenchmarkRefuseTwoMillionSteps(b *testing.B) {
	data := []byte("kind: recipe\nname: huge\nsteps:\n" + strings.Repeat("  - wait: {duration: 1s}\n", 2_000_000))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Parse("huge.yaml", data); err == nil {
			b.Fatal("accepted")
		}
	}
}

// BenchmarkRefuseOneMiBOfSteps: the most steps that fit in 1 MiB, in flow
// style (4 bytes a step), refused by the step count after the YAML parse.
func BenchmarkRefuseOneMiBOfSteps(b *testing.B) {
	head := "kind: recipe\nname: many\nsteps: ["
	n := (1<<20 - len(head) - 1) / 4
	data := []byte(head + strings.Repeat("{}, ", n)[:4*n-2] + "]")
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Parse("many.yaml", data); err == nil || !strings.Contains(err.Error(), "more than the 1000") {
			b.Fatal(err)
		}
	}
}
