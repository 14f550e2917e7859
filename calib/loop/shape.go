package loop

import (
	"errors"
	"fmt"
	"math"
)

// Branch labels of a sample.
const (
	Rising  = 1  // H increasing
	Falling = -1 // H decreasing
	Initial = 0  // initial curve, or a piece not attributed to a branch
)

// ReversalFraction is the fraction of the H range that H must move back from
// its running extremum before a reversal is declared; smaller excursions are
// noise.
const ReversalFraction = 0.1

// completeFraction is how close (as a fraction of the H range) a branch must
// start and end to the two tips to count as complete.
const completeFraction = 0.05

// Segment is a run of samples between two reversals of H, inclusive.
type Segment struct {
	Start, End int
	Dir        int  // Rising or Falling
	Complete   bool // runs from one tip to the other
	Initial    bool // the first piece, starting near H = 0
}

// Tip is a reversal of H at a loop tip: the apex of the sweep (see Tips).
type Tip struct {
	Index int
	Top   bool // maximum of H (else minimum)
	T     float64
	H, B  float64
	N     int // samples used on both sides
	// UB is a standard uncertainty of B at the tip: the standard error of
	// the lines at the apex combined with half the difference of B read on
	// the two sides; 0 when the tip is a sample of smooth data.
	UB float64
	// vH, vB are the noise variances of H and B from the line fits (0 on
	// smooth data).
	vH, vB float64
}

// Shape is the branch structure of one recorded loop.
type Shape struct {
	N        int // samples
	Segments []Segment
	Lo, Hi   float64 // extreme H in A/m
}

// ErrNoLoop is returned when H never reverses by more than the threshold.
var ErrNoLoop = errors.New("no loop: H does not reverse")

// Detect finds the segments of h. It needs at least 3 finite samples and
// one reversal of H by ReversalFraction of its range.
func Detect(h []float64) (Shape, error) {
	n := len(h)
	if n < 3 {
		return Shape{}, fmt.Errorf("%w: %d samples", ErrNoLoop, n)
	}
	lo, hi, err := hRange(h)
	if err != nil {
		return Shape{}, err
	}
	span := hi - lo
	turns, last, ok := reversals(h, ReversalFraction*span)
	if !ok {
		return Shape{}, fmt.Errorf("%w by %.0f %% of its range", ErrNoLoop, 100*ReversalFraction)
	}
	// The last segment ends at the last extremum; the samples after it moved
	// back by less than the threshold (noise, or the start of a reversal)
	// and are labelled with the last segment's direction.
	s := Shape{N: n, Lo: lo, Hi: hi}
	start := 0
	for _, end := range append(turns, last) {
		if end <= start {
			continue
		}
		d := Rising
		if h[end] < h[start] {
			d = Falling
		}
		s.Segments = append(s.Segments, Segment{Start: start, End: end, Dir: d})
		start = end
	}
	s.markComplete(h, completeFraction*span)
	return s, nil
}

// hRange returns the extremes of h, refusing a value that is not a finite
// number, a range that overflows and a constant H.
func hRange(h []float64) (lo, hi float64, err error) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for i, v := range h {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			//lint:ignore ST1005 H is the field's symbol
			return 0, 0, fmt.Errorf("H[%d] is not a finite number", i)
		}
		if v < lo {
			lo = v
		}
		if v > hi {
			hi = v
		}
	}
	if math.IsInf(hi-lo, 0) {
		//lint:ignore ST1005 H is the field's symbol
		return 0, 0, fmt.Errorf("H spans %g to %g A/m: the range overflows", lo, hi)
	}
	if !(hi-lo > 0) {
		return 0, 0, fmt.Errorf("%w: H is constant", ErrNoLoop)
	}
	return lo, hi, nil
}

// reversals returns the samples where H reverses (the running extremum
// once H has moved back from it by more than thr) and the last extremum;
// ok is false when H never moves by thr.
func reversals(h []float64, thr float64) (turns []int, last int, ok bool) {
	dir, ext, extI := 0, h[0], 0
	for i := 1; i < len(h); i++ {
		v := h[i]
		switch {
		case dir == 0 && v-h[0] > thr:
			dir, ext, extI = Rising, v, i
		case dir == 0 && h[0]-v > thr:
			dir, ext, extI = Falling, v, i
		case dir == 0:
		case float64(dir)*(v-ext) > 0:
			ext, extI = v, i
		case float64(dir)*(ext-v) > thr:
			turns = append(turns, extI)
			dir, ext, extI = -dir, v, i
		}
	}
	return turns, extI, dir != 0
}

// markComplete marks the segments that run from one tip to the other
// (within band of the extremes) and a first piece that starts near H = 0.
func (s Shape) markComplete(h []float64, band float64) {
	for k := range s.Segments {
		g := &s.Segments[k]
		a, b := h[g.Start], h[g.End]
		if g.Dir == Rising {
			g.Complete = a-s.Lo <= band && s.Hi-b <= band
		} else {
			g.Complete = s.Hi-a <= band && b-s.Lo <= band
		}
		if k == 0 && !g.Complete && math.Abs(a) <= band {
			g.Initial = true
		}
	}
}

// Label calls set for every sample index with its branch label, as
// Labels does, without allocating.
func (s Shape) Label(set func(i, branch int)) {
	for _, g := range s.Segments {
		l := g.Dir
		if g.Initial {
			l = Initial
		}
		for i := g.Start; i <= g.End; i++ {
			set(i, l)
		}
	}
	if k := len(s.Segments); k > 0 {
		g := s.Segments[k-1]
		for i := g.End + 1; i < s.N; i++ {
			set(i, g.Dir)
		}
	}
}

// Labels returns the branch label of every sample (Rising, Falling or
// Initial); a sample shared by two segments takes the later one's label.
// Pieces that are neither complete nor initial keep their direction.
func (s Shape) Labels(dst []int) []int {
	if cap(dst) < s.N {
		dst = make([]int, s.N)
	}
	dst = dst[:s.N]
	for _, g := range s.Segments {
		l := g.Dir
		if g.Initial {
			l = Initial
		}
		for i := g.Start; i <= g.End; i++ {
			dst[i] = l
		}
	}
	if k := len(s.Segments); k > 0 {
		g := s.Segments[k-1]
		for i := g.End + 1; i < s.N; i++ {
			dst[i] = g.Dir
		}
	}
	return dst
}

// Complete returns the complete segments in time order.
func (s Shape) Complete() []Segment {
	var out []Segment
	for _, g := range s.Segments {
		if g.Complete {
			out = append(out, g)
		}
	}
	return out
}

// Cycles returns pairs of consecutive complete segments of opposite
// direction, not sharing a segment: each pair is one full cycle.
func (s Shape) Cycles() [][2]Segment {
	var out [][2]Segment
	for k := 0; k+1 < len(s.Segments); k++ {
		a, b := s.Segments[k], s.Segments[k+1]
		if a.Complete && b.Complete && a.Dir != b.Dir {
			out = append(out, [2]Segment{a, b})
			k++
		}
	}
	return out
}

// TipLevels returns the mean B of the top tips and of the bottom tips, for
// centering; ok is false when either kind is missing.
func TipLevels(tips []Tip) (top, bottom float64, ok bool) {
	var nt, nb int
	for _, tp := range tips {
		if tp.Top {
			top += tp.B
			nt++
		} else {
			bottom += tp.B
			nb++
		}
	}
	if nt == 0 || nb == 0 {
		return 0, 0, false
	}
	return top / float64(nt), bottom / float64(nb), true
}

// ClosurePair returns the first and last tips of the same kind that are
// furthest apart in time: the magnetic state at both is the same in a cyclic
// loop. ok is false when no kind has two tips.
func ClosurePair(tips []Tip) (a, b Tip, ok bool) {
	best := -1.0
	for _, top := range []bool{true, false} {
		first, last := -1, -1
		for k, tp := range tips {
			if tp.Top == top {
				if first < 0 {
					first = k
				}
				last = k
			}
		}
		if first >= 0 && last > first {
			if d := tips[last].T - tips[first].T; d > best {
				best, a, b, ok = d, tips[first], tips[last], true
			}
		}
	}
	return a, b, ok
}
