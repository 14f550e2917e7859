package physics

import "math"

// figures are what a test reads off one closed loop given as samples (h, b)
// starting and ending at the positive tip.
type figures struct {
	hmax, bmax, br, hc, w float64
}

// loopFigures reads the figures of a closed loop: Br and Hc as magnitudes
// averaged over both branches (linear interpolation at the zero crossings),
// W = ∮H dB by the trapezoid rule.
func loopFigures(hs, bs []float64) figures {
	var f figures
	var br, hc []float64
	n := len(hs)
	for i := 0; i < n; i++ {
		h, b := hs[i], bs[i]
		f.hmax = math.Max(f.hmax, math.Abs(h))
		f.bmax = math.Max(f.bmax, math.Abs(b))
		if i == 0 {
			continue
		}
		hp, bp := hs[i-1], bs[i-1]
		f.w += (h + hp) / 2 * (b - bp)
		if (hp > 0) != (h > 0) && h != hp {
			br = append(br, math.Abs(bp+(b-bp)*(0-hp)/(h-hp)))
		}
		if (bp > 0) != (b > 0) && b != bp {
			hc = append(hc, math.Abs(hp+(h-hp)*(0-bp)/(b-bp)))
		}
	}
	f.br = mean(br)
	f.hc = mean(hc)
	return f
}

func mean(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// relErr is |got − want| / |want|.
func relErr(got, want float64) float64 { return math.Abs(got-want) / math.Abs(want) }
