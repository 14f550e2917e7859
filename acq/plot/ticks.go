package plot

import (
	"math"
	"strconv"
	"strings"
)

// axis is a display range snapped to a round step of 1, 2 or 5 × 10^k.
type axis struct {
	lo, hi, step float64
}

// niceAxis covers [lo, hi] with about target intervals of a round step.
func niceAxis(lo, hi float64, target int) axis {
	if hi <= lo {
		hi = lo + 1
	}
	raw := (hi - lo) / float64(target)
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step := mag
	for _, m := range []float64{1, 2, 5, 10} {
		if m*mag >= raw {
			step = m * mag
			break
		}
	}
	return axis{
		lo:   math.Floor(lo/step+1e-9) * step,
		hi:   math.Ceil(hi/step-1e-9) * step,
		step: step,
	}
}

// ticks returns the tick values from lo to hi inclusive.
func (a axis) ticks() []float64 {
	n := int(math.Round((a.hi - a.lo) / a.step))
	out := make([]float64, 0, n+1)
	for i := 0; i <= n; i++ {
		v := a.lo + float64(i)*a.step
		if math.Abs(v) < a.step*1e-9 {
			v = 0
		}
		out = append(out, v)
	}
	return out
}

// format prints v with as many decimals as the step needs; a minus sign is
// the typographic one (U+2212).
func (a axis) format(v float64) string {
	dec := 0
	if a.step < 1 {
		dec = int(math.Ceil(-math.Log10(a.step) - 1e-9))
	}
	s := strconv.FormatFloat(v, 'f', dec, 64)
	return strings.Replace(s, "-", "−", 1)
}

// formatSig prints v with n significant digits, no exponent for ordinary sizes.
func formatSig(v float64, n int) string {
	if v == 0 || !finite(v) {
		return strconv.FormatFloat(v, 'g', n, 64)
	}
	dec := n - 1 - int(math.Floor(math.Log10(math.Abs(v))))
	if dec < 0 {
		dec = 0
	}
	if dec > 9 {
		return strconv.FormatFloat(v, 'g', n, 64)
	}
	return strconv.FormatFloat(v, 'f', dec, 64)
}
