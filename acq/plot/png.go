package plot

import (
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"sync"

	"golang.org/x/image/font"
	"golang.org/x/image/font/gofont/goregular"
	"golang.org/x/image/font/opentype"
	"golang.org/x/image/math/fixed"

	"hystd/acq/record"
)

// PNG writes loops as a PNG image to w: the same scene as SVG, rasterized
// with anti-aliased lines and text in an outline font (Go Regular, 12 px,
// with the labels' symbols "−", "³", "μ", "±", "·"). It returns ErrNoPoints
// when no loop holds a finite point, or a write error; w is not closed.
func PNG(w io.Writer, loops []record.Loop, o Options) error {
	s, err := build(loops, o)
	if err != nil {
		return err
	}
	img, err := s.raster()
	if err != nil {
		return err
	}
	return (&png.Encoder{CompressionLevel: png.BestSpeed}).Encode(w, img)
}

// canvas is an RGBA image with blending helpers and the label font.
type canvas struct {
	*image.RGBA
	face font.Face
}

// blend mixes colour c into pixel (x, y) with coverage a in [0, 1].
func (cv canvas) blend(x, y int, c rgb, a float64) {
	if a <= 0 || !(image.Point{x, y}.In(cv.Rect)) {
		return
	}
	if a > 1 {
		a = 1
	}
	i := cv.PixOffset(x, y)
	p := cv.Pix[i : i+4 : i+4]
	p[0] = uint8(float64(p[0])*(1-a) + float64(c.r)*a + 0.5)
	p[1] = uint8(float64(p[1])*(1-a) + float64(c.g)*a + 0.5)
	p[2] = uint8(float64(p[2])*(1-a) + float64(c.b)*a + 0.5)
	p[3] = 255
}

// line draws a segment of width wd pixels with coverage from the distance to
// the segment (a simple, exact-enough anti-aliasing for thin lines).
func (cv canvas) line(a, b pt, wd float64, c rgb) {
	r := wd/2 + 0.5
	minX, maxX := int(math.Floor(math.Min(a.x, b.x)-r)), int(math.Ceil(math.Max(a.x, b.x)+r))
	minY, maxY := int(math.Floor(math.Min(a.y, b.y)-r)), int(math.Ceil(math.Max(a.y, b.y)+r))
	bd := cv.Rect
	minX, minY = max(minX, bd.Min.X), max(minY, bd.Min.Y)
	maxX, maxY = min(maxX, bd.Max.X-1), min(maxY, bd.Max.Y-1)
	dx, dy := b.x-a.x, b.y-a.y
	l2 := dx*dx + dy*dy
	for y := minY; y <= maxY; y++ {
		for x := minX; x <= maxX; x++ {
			px, py := float64(x)+0.5, float64(y)+0.5
			t := 0.0
			if l2 > 0 {
				t = ((px-a.x)*dx + (py-a.y)*dy) / l2
				t = math.Max(0, math.Min(1, t))
			}
			d := math.Hypot(px-(a.x+t*dx), py-(a.y+t*dy))
			cv.blend(x, y, c, wd/2+0.5-d)
		}
	}
}

// dashedLine draws a segment as dashes of on pixels separated by off pixels;
// phase carries the pattern over from the previous segment and is returned.
func (cv canvas) dashedLine(a, b pt, wd float64, c rgb, on, off, phase float64) float64 {
	l := math.Hypot(b.x-a.x, b.y-a.y)
	if l == 0 {
		return phase
	}
	ux, uy := (b.x-a.x)/l, (b.y-a.y)/l
	pos := 0.0
	for pos < l {
		per := math.Mod(phase, on+off)
		if per < on {
			n := math.Min(on-per, l-pos)
			cv.line(pt{a.x + ux*pos, a.y + uy*pos}, pt{a.x + ux*(pos+n), a.y + uy*(pos+n)}, wd, c)
			pos += n
			phase += n
		} else {
			n := math.Min(on+off-per, l-pos)
			pos += n
			phase += n
		}
	}
	return phase
}

// ring draws a circle outline of radius r.
func (cv canvas) ring(at pt, r, wd float64, c rgb) {
	for y := int(at.y - r - wd); y <= int(at.y+r+wd)+1; y++ {
		for x := int(at.x - r - wd); x <= int(at.x+r+wd)+1; x++ {
			d := math.Abs(math.Hypot(float64(x)+0.5-at.x, float64(y)+0.5-at.y) - r)
			cv.blend(x, y, c, wd/2+0.5-d)
		}
	}
}

// labelSize is the PNG's text size in pixels (the SVG's 12 px).
const labelSize = 12

var (
	faceOnce sync.Once
	face     font.Face
	faceErr  error
)

// labelFace is Go Regular (golang.org/x/image/font/gofont, an outline font
// with the Latin-1, Greek and mathematical minus glyphs the labels use:
// μ, −, ², ³, ±, ·) at labelSize pixels.
func labelFace() (font.Face, error) {
	faceOnce.Do(func() {
		f, err := opentype.Parse(goregular.TTF)
		if err != nil {
			faceErr = fmt.Errorf("plot: Go Regular font: %w", err)
			return
		}
		face, faceErr = opentype.NewFace(f, &opentype.FaceOptions{Size: labelSize, DPI: 72, Hinting: font.HintingFull})
	})
	return face, faceErr
}

// text draws s with its baseline at y; anchor is 0 for start, 0.5 middle, 1 end.
func (cv canvas) text(x, y float64, s string, anchor float64, c rgb) {
	w := float64(font.MeasureString(cv.face, s).Round())
	d := font.Drawer{
		Dst:  cv.RGBA,
		Src:  image.NewUniform(color.RGBA{c.r, c.g, c.b, 255}),
		Face: cv.face,
		Dot:  fixed.P(int(math.Round(x-anchor*w)), int(math.Round(y))),
	}
	d.DrawString(s)
}

// textUp draws s rotated a quarter turn anticlockwise, centred on (x, y).
func (cv canvas) textUp(x, y float64, s string, c rgb) {
	m := cv.face.Metrics()
	asc, h := m.Ascent.Ceil(), (m.Ascent + m.Descent).Ceil()
	w := font.MeasureString(cv.face, s).Ceil()
	tmp := image.NewAlpha(image.Rect(0, 0, w, h))
	d := font.Drawer{Dst: tmp, Src: image.Opaque, Face: cv.face, Dot: fixed.P(0, asc)}
	d.DrawString(s)
	ox, oy := int(x)-h/2, int(y)+w/2
	for ty := 0; ty < h; ty++ {
		for tx := 0; tx < w; tx++ {
			if a := tmp.AlphaAt(tx, ty).A; a > 0 {
				cv.blend(ox+ty, oy-tx, c, float64(a)/255)
			}
		}
	}
}

func (s *scene) raster() (*image.RGBA, error) {
	fc, err := labelFace()
	if err != nil {
		return nil, err
	}
	cv := canvas{image.NewRGBA(image.Rect(0, 0, s.w, s.h)), fc}
	for i := range cv.Pix {
		cv.Pix[i] = 255
	}
	if s.title != "" {
		cv.text(s.x0, 24, s.title, 0, colInk)
	}
	for _, t := range s.xticks {
		cv.line(pt{t.px, s.y0}, pt{t.px, s.y1}, 1, colGrid)
		cv.text(t.px, s.y1+17, t.label, 0.5, colInk)
	}
	for _, t := range s.yticks {
		cv.line(pt{s.x0, t.px}, pt{s.x1, t.px}, 1, colGrid)
		cv.text(s.x0-6, t.px+4, t.label, 1, colInk)
	}
	if s.xzero >= s.x0 && s.xzero <= s.x1 {
		cv.line(pt{s.xzero, s.y0}, pt{s.xzero, s.y1}, 1.2, colAxis)
	}
	if s.yzero >= s.y0 && s.yzero <= s.y1 {
		cv.line(pt{s.x0, s.yzero}, pt{s.x1, s.yzero}, 1.2, colAxis)
	}
	for _, e := range [][2]pt{
		{{s.x0, s.y0}, {s.x1, s.y0}}, {{s.x1, s.y0}, {s.x1, s.y1}},
		{{s.x1, s.y1}, {s.x0, s.y1}}, {{s.x0, s.y1}, {s.x0, s.y0}},
	} {
		cv.line(e[0], e[1], 1.2, colAxis)
	}
	cv.text((s.x0+s.x1)/2, s.y1+40, s.xlabel, 0.5, colInk)
	cv.textUp(18, (s.y0+s.y1)/2, s.ylabel, colInk)

	// Traces are clipped to the plot area by drawing on a sub-image.
	area := canvas{cv.SubImage(image.Rect(int(s.x0), int(s.y0), int(s.x1)+1, int(s.y1)+1)).(*image.RGBA), fc}
	for _, t := range s.traces {
		for _, seg := range t.segs {
			phase := 0.0
			if len(seg) == 1 {
				area.line(seg[0], seg[0], 1.6, t.col)
			}
			for k := 1; k < len(seg); k++ {
				if t.dashed {
					phase = area.dashedLine(seg[k-1], seg[k], 1.6, t.col, 6, 4, phase)
				} else {
					area.line(seg[k-1], seg[k], 1.6, t.col)
				}
			}
		}
	}
	if m := s.mark; m != nil {
		phase := 0.0
		for k := 1; k < len(m.curve); k++ {
			phase = area.dashedLine(m.curve[k-1], m.curve[k], 1, colMark, 2, 3, phase)
		}
		area.ring(m.at, 5, 2, colMark)
		cv.text(m.at.x+10, m.at.y-12, m.label, 0, colMark)
	}
	lx, ly := s.x0+10, s.y0+16
	for _, t := range s.legend {
		cv.line(pt{lx, ly - 4}, pt{lx + 22, ly - 4}, 3, t.col)
		cv.text(lx+28, ly, t.label, 0, colInk)
		ly += 16
	}
	return cv.RGBA, nil
}
