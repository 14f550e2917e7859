package process

import (
	"math"

	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/plausible"
	"hystd/calib/units"
)

// Implausible returns the plausibility findings of a processed loop
// (calib/plausible): |J| above the ceiling no material exceeds, or μa above
// 10⁷. |J| is the largest of the corrected points when the loop carries
// them, otherwise what its figures give (Bmax − μ0·Hmax at the tips, Br at
// H = 0), so a loop summary without points is judged too. Each finding
// starts with plausible.Flag; none means plausible or not processed.
func Implausible(l record.Loop) []string {
	jmax := math.NaN()
	for _, p := range l.Points {
		if a := math.Abs(p.J); !math.IsNaN(a) && !math.IsInf(a, 0) && !(a <= jmax) {
			jmax = a
		}
	}
	fig := map[string]float64{}
	for _, f := range l.Figures {
		fig[f.Name] = f.Value
	}
	if len(l.Points) == 0 {
		bmax, okB := fig[loop.FigBmax]
		hmax, okH := fig[loop.FigHmax]
		if okB && okH {
			jmax = math.Abs(bmax - units.Mu0*hmax)
		}
		if br, ok := fig[loop.FigBr]; ok && !(math.Abs(br) <= jmax) {
			jmax = math.Abs(br)
		}
	}
	muA, ok := fig[loop.FigMuA]
	if !ok {
		muA = math.NaN()
	}
	return plausible.Check(jmax, muA)
}
