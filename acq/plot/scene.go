// Package plot draws B–H and J–H loops as SVG or PNG for reports, the demo
// and `hystd export`. Both renderers draw the same scene: axes with ticks and
// labels, one coloured trace per loop, a legend, and in the second-quadrant
// view a marker at the (BH)max point.
//
// Drawing is pure: no I/O beyond the io.Writer given. Functions are safe for
// concurrent use; they keep no state.
package plot

import (
	"errors"
	"fmt"
	"math"

	"hystd/acq/record"
)

// Quantity selects the ordinate of the plot.
type Quantity string

// Ordinates.
const (
	FluxDensity  Quantity = "B" // B against H
	Polarization Quantity = "J" // J = B − μ0·H against H
)

// Options control a plot. The zero value draws B against H in SI units on an
// 800×560 canvas.
type Options struct {
	Width, Height int      // canvas size in pixels; 0: 800×560
	Y             Quantity // "B" (default) or "J"
	// CGS labels the axes in Oe and G instead of A/m and T.
	CGS bool
	// SecondQuadrant shows only H ≤ 0, B ≥ 0 (the demagnetization curve of a
	// magnet) with both B and J traces, and marks the point of largest |B·H|.
	SecondQuadrant bool
	Title          string
	// Labels names each loop in the legend; missing entries default to
	// "RUN #N".
	Labels []string
	// MaxPoints bounds the vertices drawn per trace (0: 4000). Points closer
	// than half a pixel to the previous vertex are dropped first.
	MaxPoints int
}

// ErrNoPoints is returned when no loop holds a finite point to draw.
var ErrNoPoints = errors.New("plot: no finite points to draw")

// palette holds the trace colours, chosen for contrast on white and for
// telling neighbours apart in greyscale print.
var palette = []rgb{
	{0x1b, 0x6f, 0x7a}, // teal
	{0xb5, 0x53, 0x1f}, // rust
	{0x5c, 0x6e, 0x12}, // olive
	{0x7a, 0x3b, 0x6e}, // plum
	{0x35, 0x47, 0x8f}, // slate blue
	{0xa8, 0x84, 0x14}, // ochre
}

type rgb struct{ r, g, b uint8 }

func (c rgb) hex() string { return fmt.Sprintf("#%02x%02x%02x", c.r, c.g, c.b) }

var (
	colInk   = rgb{0x22, 0x26, 0x2a}
	colGrid  = rgb{0xe2, 0xe5, 0xdf}
	colAxis  = rgb{0x6a, 0x70, 0x74}
	colMark  = rgb{0xc0, 0x1c, 0x28}
	colPaper = rgb{0xff, 0xff, 0xff}
)

type pt struct{ x, y float64 }

type tick struct {
	px    float64 // pixel position along the axis
	label string
}

type trace struct {
	label  string
	col    rgb
	dashed bool
	segs   [][]pt // pixel coordinates; a NaN splits a segment
}

type marker struct {
	at    pt
	label string
	curve []pt // constant-energy hyperbola through the marker, pixels
}

// scene is everything a renderer draws, in pixel coordinates with y down.
type scene struct {
	w, h           int
	x0, y0, x1, y1 float64 // plot area
	xticks, yticks []tick
	xzero, yzero   float64 // pixel of the zero lines; NaN when outside
	xlabel, ylabel string
	title          string
	traces         []trace
	legend         []trace
	mark           *marker
}

// scale maps SI values to display units and names them.
type scale struct {
	hMul, yMul float64
	hUnit      string
	yUnit      string
	eMul       float64 // J/m³ to display energy unit
	eUnit      string
}

func newScale(o Options, hmax, ymax float64) scale {
	if o.CGS {
		s := scale{hMul: oerstedPerAm, hUnit: "Oe", yMul: gaussPerTesla, yUnit: "G",
			eMul: megaGaussOerstedPerJm3, eUnit: "MGOe"}
		if hmax*s.hMul >= 1e4 {
			s.hMul, s.hUnit = s.hMul/1e3, "kOe"
		}
		if ymax*s.yMul >= 1e4 {
			s.yMul, s.yUnit = s.yMul/1e3, "kG"
		}
		return s
	}
	s := scale{hMul: 1, hUnit: "A/m", yMul: 1, yUnit: "T", eMul: 1e-3, eUnit: "kJ/m³"}
	switch {
	case hmax >= 1e6:
		s.hMul, s.hUnit = 1e-6, "MA/m"
	case hmax >= 1e3:
		s.hMul, s.hUnit = 1e-3, "kA/m"
	}
	if ymax < 0.1 {
		s.yMul, s.yUnit = 1e3, "mT"
	}
	return s
}

// yOf returns the ordinate of p for q, in T.
func yOf(p record.Point, q Quantity) float64 {
	if q == Polarization {
		return p.J
	}
	return p.B
}

func finite(v ...float64) bool {
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// build lays out the scene for loops under o.
func build(loops []record.Loop, o Options) (*scene, error) {
	o, err := withDefaults(o)
	if err != nil {
		return nil, err
	}
	e, ok := dataExtent(loops, o)
	if !ok {
		return nil, ErrNoPoints
	}
	hmax, ymax := e.square(o.SecondQuadrant)
	sc := newScale(o, hmax, ymax)
	s, m := layout(o, e, sc)
	s.addTraces(loops, o, m)
	if o.SecondQuadrant {
		s.mark = bhMarker(loops, e.hlo, m)
	}
	return s, nil
}

// withDefaults fills the options' defaults and refuses impossible ones.
func withDefaults(o Options) (Options, error) {
	if o.Width == 0 {
		o.Width = 800
	}
	if o.Height == 0 {
		o.Height = 560
	}
	if o.Width < 200 || o.Height < 150 || o.Width > 8000 || o.Height > 8000 {
		return o, fmt.Errorf("plot: canvas %d×%d px outside 200×150 … 8000×8000", o.Width, o.Height)
	}
	switch o.Y {
	case "":
		o.Y = FluxDensity
	case FluxDensity, Polarization:
	default:
		return o, fmt.Errorf("plot: ordinate %q: want \"B\" or \"J\"", o.Y)
	}
	if o.MaxPoints <= 0 {
		o.MaxPoints = 4000
	}
	return o, nil
}

// extent is the range of the drawn data in SI: H and the ordinate.
type extent struct{ hlo, hhi, ylo, yhi float64 }

// dataExtent is the range of the finite points drawn under o (those of the
// second quadrant only, when o asks for it); false when there are none.
func dataExtent(loops []record.Loop, o Options) (extent, bool) {
	e := extent{math.Inf(1), math.Inf(-1), math.Inf(1), math.Inf(-1)}
	n := 0
	for _, l := range loops {
		for _, p := range l.Points {
			if o.SecondQuadrant {
				if !finite(p.H, p.B, p.J) || p.H > 0 {
					continue
				}
				e.hlo = math.Min(e.hlo, p.H)
				e.yhi = math.Max(e.yhi, math.Max(p.B, p.J))
				n++
				continue
			}
			y := yOf(p, o.Y)
			if !finite(p.H, y) {
				continue
			}
			e.hlo, e.hhi = math.Min(e.hlo, p.H), math.Max(e.hhi, p.H)
			e.ylo, e.yhi = math.Min(e.ylo, y), math.Max(e.yhi, y)
			n++
		}
	}
	return e, n > 0
}

// square turns the data range into the drawn one, and returns the largest
// |H| and |ordinate| drawn: the second quadrant from the origin, or axes
// symmetric about the origin so that it sits in the middle of a loop.
func (e *extent) square(secondQuadrant bool) (hmax, ymax float64) {
	if secondQuadrant {
		e.hhi, e.ylo = 0, 0
		if e.hlo >= 0 {
			e.hlo = -1
		}
		if e.yhi <= 0 {
			e.yhi = 1
		}
		return -e.hlo, e.yhi
	}
	hmax = math.Max(math.Abs(e.hlo), math.Abs(e.hhi))
	ymax = math.Max(math.Abs(e.ylo), math.Abs(e.yhi))
	if hmax == 0 {
		hmax = 1
	}
	if ymax == 0 {
		ymax = 1
	}
	e.hlo, e.hhi, e.ylo, e.yhi = -hmax, hmax, -ymax, ymax
	return hmax, ymax
}

// mapping takes SI values to pixels of a scene.
type mapping struct {
	s      *scene
	sc     scale
	xa, ya axis
}

func (m mapping) px(h float64) float64 {
	return m.s.x0 + (h*m.sc.hMul-m.xa.lo)/(m.xa.hi-m.xa.lo)*(m.s.x1-m.s.x0)
}

func (m mapping) py(y float64) float64 {
	return m.s.y1 - (y*m.sc.yMul-m.ya.lo)/(m.ya.hi-m.ya.lo)*(m.s.y1-m.s.y0)
}

// layout places the plot area, the axes with their ticks and labels.
func layout(o Options, e extent, sc scale) (*scene, mapping) {
	s := &scene{w: o.Width, h: o.Height, title: o.Title}
	s.x0, s.y0 = 78, 40
	if o.Title == "" {
		s.y0 = 22
	}
	s.x1, s.y1 = float64(o.Width)-20, float64(o.Height)-56

	xa := niceAxis(e.hlo*sc.hMul, e.hhi*sc.hMul, 8)
	ya := niceAxis(e.ylo*sc.yMul, e.yhi*sc.yMul, 7)
	if o.SecondQuadrant {
		xa.hi, ya.lo = 0, 0
	}
	m := mapping{s: s, sc: sc, xa: xa, ya: ya}
	for _, v := range xa.ticks() {
		s.xticks = append(s.xticks, tick{px: s.x0 + (v-xa.lo)/(xa.hi-xa.lo)*(s.x1-s.x0), label: xa.format(v)})
	}
	for _, v := range ya.ticks() {
		s.yticks = append(s.yticks, tick{px: s.y1 - (v-ya.lo)/(ya.hi-ya.lo)*(s.y1-s.y0), label: ya.format(v)})
	}
	s.xzero, s.yzero = m.px(0), m.py(0)
	s.xlabel = "H (" + sc.hUnit + ")"
	switch {
	case o.SecondQuadrant:
		s.ylabel = "B solid, J dashed (" + sc.yUnit + ")"
	case o.Y == Polarization:
		s.ylabel = "J (" + sc.yUnit + ")"
	default:
		s.ylabel = "B (" + sc.yUnit + ")"
	}
	return s, m
}

// addTraces draws each loop (B and J of the second quadrant, when o asks
// for it) with its label and colour, and lists it in the legend.
func (s *scene) addTraces(loops []record.Loop, o Options, m mapping) {
	minStep := 0.5 // px
	for i, l := range loops {
		label := fmt.Sprintf("%s #%d", l.RunID, l.N)
		if i < len(o.Labels) && o.Labels[i] != "" {
			label = o.Labels[i]
		}
		col := palette[i%len(palette)]
		if o.SecondQuadrant {
			b := trace{label: label, col: col}
			j := trace{label: label + " J", col: col, dashed: true}
			b.segs = decimate(l.Points, func(p record.Point) (float64, float64, bool) {
				return m.px(p.H), m.py(p.B), p.H <= 0 && p.B >= 0
			}, minStep, o.MaxPoints)
			j.segs = decimate(l.Points, func(p record.Point) (float64, float64, bool) {
				return m.px(p.H), m.py(p.J), p.H <= 0 && p.J >= 0
			}, minStep, o.MaxPoints)
			s.traces = append(s.traces, b, j)
			s.legend = append(s.legend, b)
			continue
		}
		t := trace{label: label, col: col}
		t.segs = decimate(l.Points, func(p record.Point) (float64, float64, bool) {
			return m.px(p.H), m.py(yOf(p, o.Y)), true
		}, minStep, o.MaxPoints)
		s.traces = append(s.traces, t)
		s.legend = append(s.legend, t)
	}
}

// bhMarker marks (BH)max of the second quadrant with the hyperbola B·H =
// −(BH)max through it, clipped to the plot area (H from hlo to 0); nil when
// no point lies in the quadrant.
func bhMarker(loops []record.Loop, hlo float64, m mapping) *marker {
	h, b, e, ok := BHMax(loops)
	if !ok {
		return nil
	}
	mk := &marker{at: pt{m.px(h), m.py(b)}}
	mk.label = fmt.Sprintf("(BH)max %s %s", formatSig(e*m.sc.eMul, 3), m.sc.eUnit)
	for k := 0; k <= 80; k++ {
		hh := hlo + (float64(k)/80)*(-hlo)
		if hh >= 0 {
			break
		}
		bb := -e / hh
		if bb*m.sc.yMul > m.ya.hi {
			continue
		}
		mk.curve = append(mk.curve, pt{m.px(hh), m.py(bb)})
	}
	return mk
}

// BHMax returns the plotted point of largest energy product |B·H| in the
// second quadrant (H < 0, B > 0) over all loops: H in A/m, B in T and the
// product in J/m³. It is the largest product among the sampled points, not
// interpolated between them; ok is false when no point lies in the quadrant.
func BHMax(loops []record.Loop) (h, b, e float64, ok bool) {
	for _, l := range loops {
		for _, p := range l.Points {
			if !finite(p.H, p.B) || p.H >= 0 || p.B <= 0 {
				continue
			}
			if v := -p.H * p.B; !ok || v > e {
				h, b, e, ok = p.H, p.B, v, true
			}
		}
	}
	return
}

// decimate turns points into pixel segments. Points for which keep is false
// or whose coordinates are not finite end the current segment. A vertex
// closer than minStep pixels to the last kept one is dropped; if a trace
// still holds more than maxPts vertices, the stride is widened.
func decimate(ps []record.Point, at func(record.Point) (x, y float64, keep bool), minStep float64, maxPts int) [][]pt {
	stride := 1
	if len(ps) > 4*maxPts {
		stride = len(ps) / (4 * maxPts)
	}
	var segs [][]pt
	var cur []pt
	flush := func() {
		if len(cur) > 0 {
			segs = append(segs, cur)
		}
		cur = nil
	}
	total := 0
	for i := 0; i < len(ps); i += stride {
		x, y, keep := at(ps[i])
		if !keep || !finite(x, y) {
			flush()
			continue
		}
		if n := len(cur); n > 0 && i+stride < len(ps) {
			if math.Hypot(x-cur[n-1].x, y-cur[n-1].y) < minStep {
				continue
			}
		}
		cur = append(cur, pt{x, y})
		total++
	}
	flush()
	if total > maxPts && minStep < 64 {
		return decimate(ps, at, minStep*2, maxPts)
	}
	return segs
}
