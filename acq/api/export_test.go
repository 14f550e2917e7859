package api

import (
	"math"

	"hystd/acq/record"
	"hystd/calib/units"
)

// Put stores a run with its loops, for the external browser tests.
var Put = put

// StraightLineMagnet is the demagnetization curve of an ideal magnet,
// B = Br + μ0·μrec·H from H = 0 down to HcB, n+1 points.
func StraightLineMagnet(id string, n int, br, murec float64) record.Loop {
	l := record.Loop{RunID: id, N: 1, Kind: "demag-curve", Amplitude: br / (units.Mu0 * murec), AmpUnit: "A/m"}
	hcb := br / (units.Mu0 * murec)
	for i := 0; i <= n; i++ {
		h := -hcb * float64(i) / float64(n)
		b := br + units.Mu0*murec*h
		l.Points = append(l.Points, record.Point{H: h, B: b, J: b - units.Mu0*h})
	}
	l.Figures = []record.Figure{{Name: "Br", Value: br, U: math.NaN(), Unit: "T"}}
	return l
}
