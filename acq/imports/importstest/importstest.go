// Package importstest builds raw recordings for the tests of the packages
// that take them in (the API's import endpoint, `hystd import`).
package importstest

import (
	"math"
	"strconv"
	"strings"
)

// CoarseTanh is the exact loop of acq/imports' tests, coarse (400 samples
// per segment), as a raw recording: branches B = 1.5 T·tanh((H ± 100
// A/m)/50 A/m), H = N1·I/l with N1 = 100 and l = 0.1 m (the fixture
// acq/imports/testdata/fixture-import.yaml, so I in mA equals H in A/m),
// ψ = N2·A·B with N2·A = 2.5e-3 m², plus a 20 µV integrator offset; holds
// at H = 0 of 100 samples each; one sample every 10 ms.
func CoarseTanh() string {
	var b strings.Builder
	b.WriteString("t (s),I (mA),psi (uV s)\n")
	k := 0
	row := func(h, dir float64) {
		t := float64(k) * 0.01
		k++
		b.WriteString(strings.Join([]string{ftoa(t), ftoa(h), ftoa((2.5e-3*1.5*math.Tanh((h+dir*100)/50) + 20e-6*t) * 1e6)}, ",") + "\n")
	}
	for range 100 {
		row(0, 1)
	}
	seg := func(from, to, dir float64) {
		for j := 1; j <= 400; j++ {
			row(from+(to-from)*float64(j)/400, dir)
		}
	}
	seg(0, -1000, 1)
	seg(-1000, 1000, -1)
	seg(1000, -1000, 1)
	seg(-1000, 0, -1)
	for range 100 {
		row(0, -1)
	}
	return b.String()
}

func ftoa(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
