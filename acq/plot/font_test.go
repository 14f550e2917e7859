package plot

import (
	"image"
	"testing"

	"golang.org/x/image/font"
	"golang.org/x/image/font/gofont/goregular"
	"golang.org/x/image/font/sfnt"
	"golang.org/x/image/math/fixed"
)

// TestLabelGlyphs: the symbols of the labels are real glyphs of Go Regular
// (looked up in the font's own cmap with golang.org/x/image/font/sfnt, not
// the notdef box), and each renders differently from the ASCII stand-in the
// old bitmap font used.
func TestLabelGlyphs(t *testing.T) {
	f, err := sfnt.Parse(goregular.TTF)
	if err != nil {
		t.Fatal(err)
	}
	fc, err := labelFace()
	if err != nil {
		t.Fatal(err)
	}
	var buf sfnt.Buffer
	render := func(s string) *image.Alpha {
		img := image.NewAlpha(image.Rect(0, 0, 40, 20))
		d := font.Drawer{Dst: img, Src: image.Opaque, Face: fc, Dot: fixed.P(2, 15)}
		d.DrawString(s)
		return img
	}
	for _, tc := range []struct{ sym, ascii string }{
		{"μ", "u"}, {"−", "-"}, {"²", "2"}, {"³", "3"}, {"±", "+"}, {"·", "."},
	} {
		r := []rune(tc.sym)[0]
		gi, err := f.GlyphIndex(&buf, r)
		if err != nil || gi == 0 {
			t.Errorf("%q (U+%04X): no glyph in Go Regular (%v)", tc.sym, r, err)
			continue
		}
		if _, _, ok := fc.GlyphBounds(r); !ok {
			t.Errorf("%q: the face has no bounds for it", tc.sym)
		}
		a, b := render(tc.sym), render(tc.ascii)
		same := true
		ink := 0
		for i := range a.Pix {
			if a.Pix[i] != b.Pix[i] {
				same = false
			}
			if a.Pix[i] > 0 {
				ink++
			}
		}
		if same || ink == 0 {
			t.Errorf("%q renders like %q (ink %d)", tc.sym, tc.ascii, ink)
		}
	}
}
