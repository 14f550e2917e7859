package process_test

import (
	"fmt"
	"math"
	"time"

	"hystd/acq/process"
	"hystd/acq/record"
	"hystd/calib/synth"
)

// Example processes one recorded loop step of a ring 50/40/10 mm (mean
// path): the engine passes the raw samples of the step and the Setup built
// once per specimen with SetupFrom and SetAccuracy.
func Example() {
	s := process.Setup{PathLength: math.Pi * 0.045, Area: 50e-6, N1: 200, N2: 100}
	// An analytic loop stands in for the instruments: I = H·l_m/N1, ψ = N2·A·B.
	t, h, b := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 2000, Start: "tip"}.Generate(
		synth.Tanh{Bs: 1.5, Hc: 50, A: 40, Ai: 60})
	raw := make([]record.Sample, len(h))
	for i := range h {
		raw[i] = record.Sample{T: time.Duration(t[i] * 1e9), Phase: record.Sweep,
			I: h[i] * float64(s.PathLength) / 200, Psi: b[i] * 100 * 50e-6, BProbe: math.NaN(), TempC: math.NaN()}
	}
	_, figs, _, err := process.Loop(raw, s)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, f := range figs {
		if f.Name == "HcB" || f.Name == "Br" {
			fmt.Printf("%s %.3g %s\n", f.Name, f.Value, f.Unit)
		}
	}
	// Output:
	// Br 1.27 T
	// HcB 50 A/m
}
