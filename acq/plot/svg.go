package plot

import (
	"bufio"
	"fmt"
	"html"
	"io"
	"strconv"

	"hystd/acq/record"
)

// SVG writes loops as a standalone SVG 1.1 document to w. Each loop's trace
// is a <polyline> with class "trace" and a data-loop attribute "RUN#N"; the
// (BH)max marker, when drawn, is a <circle> with class "bhmax". It returns
// ErrNoPoints when no loop holds a finite point, or a write error; w is not
// closed.
func SVG(w io.Writer, loops []record.Loop, o Options) error {
	s, err := build(loops, o)
	if err != nil {
		return err
	}
	bw := bufio.NewWriter(w)
	s.svg(bw, loops)
	return bw.Flush()
}

func f1(v float64) string { return strconv.FormatFloat(v, 'f', 1, 64) }

func (s *scene) svg(w *bufio.Writer, loops []record.Loop) {
	esc := html.EscapeString
	fmt.Fprintf(w, `<?xml version="1.0" encoding="UTF-8"?>`+"\n")
	fmt.Fprintf(w, `<svg xmlns="http://www.w3.org/2000/svg" width="%d" height="%d" viewBox="0 0 %d %d" font-family="DejaVu Sans, Helvetica, Arial, sans-serif" font-size="12">`+"\n", s.w, s.h, s.w, s.h)
	fmt.Fprintf(w, `<rect width="%d" height="%d" fill="%s"/>`+"\n", s.w, s.h, colPaper.hex())
	if s.title != "" {
		fmt.Fprintf(w, `<text x="%s" y="24" font-size="15" fill="%s">%s</text>`+"\n", f1(s.x0), colInk.hex(), esc(s.title))
	}
	// Grid and ticks.
	fmt.Fprintf(w, `<g stroke="%s" stroke-width="1">`+"\n", colGrid.hex())
	for _, t := range s.xticks {
		fmt.Fprintf(w, `<line x1="%s" y1="%s" x2="%s" y2="%s"/>`+"\n", f1(t.px), f1(s.y0), f1(t.px), f1(s.y1))
	}
	for _, t := range s.yticks {
		fmt.Fprintf(w, `<line x1="%s" y1="%s" x2="%s" y2="%s"/>`+"\n", f1(s.x0), f1(t.px), f1(s.x1), f1(t.px))
	}
	fmt.Fprintln(w, `</g>`)
	fmt.Fprintf(w, `<g stroke="%s" stroke-width="1.2">`+"\n", colAxis.hex())
	if s.xzero >= s.x0 && s.xzero <= s.x1 {
		fmt.Fprintf(w, `<line x1="%s" y1="%s" x2="%s" y2="%s"/>`+"\n", f1(s.xzero), f1(s.y0), f1(s.xzero), f1(s.y1))
	}
	if s.yzero >= s.y0 && s.yzero <= s.y1 {
		fmt.Fprintf(w, `<line x1="%s" y1="%s" x2="%s" y2="%s"/>`+"\n", f1(s.x0), f1(s.yzero), f1(s.x1), f1(s.yzero))
	}
	fmt.Fprintf(w, `<rect x="%s" y="%s" width="%s" height="%s" fill="none"/>`+"\n", f1(s.x0), f1(s.y0), f1(s.x1-s.x0), f1(s.y1-s.y0))
	fmt.Fprintln(w, `</g>`)
	fmt.Fprintf(w, `<g fill="%s">`+"\n", colInk.hex())
	for _, t := range s.xticks {
		fmt.Fprintf(w, `<text x="%s" y="%s" text-anchor="middle">%s</text>`+"\n", f1(t.px), f1(s.y1+16), esc(t.label))
	}
	for _, t := range s.yticks {
		fmt.Fprintf(w, `<text x="%s" y="%s" text-anchor="end">%s</text>`+"\n", f1(s.x0-6), f1(t.px+4), esc(t.label))
	}
	fmt.Fprintf(w, `<text x="%s" y="%s" text-anchor="middle" font-size="13">%s</text>`+"\n", f1((s.x0+s.x1)/2), f1(s.y1+38), esc(s.xlabel))
	fmt.Fprintf(w, `<text transform="translate(18 %s) rotate(-90)" text-anchor="middle" font-size="13">%s</text>`+"\n", f1((s.y0+s.y1)/2), esc(s.ylabel))
	fmt.Fprintln(w, `</g>`)

	// Traces, clipped to the plot area.
	fmt.Fprintf(w, `<clipPath id="area"><rect x="%s" y="%s" width="%s" height="%s"/></clipPath>`+"\n", f1(s.x0), f1(s.y0), f1(s.x1-s.x0), f1(s.y1-s.y0))
	fmt.Fprintln(w, `<g clip-path="url(#area)" fill="none" stroke-width="1.6" stroke-linejoin="round">`)
	li := 0
	for ti, t := range s.traces {
		id := ""
		if !t.dashed && li < len(loops) {
			id = fmt.Sprintf("%s#%d", loops[li].RunID, loops[li].N)
			li++
		} else if t.dashed && li > 0 {
			id = fmt.Sprintf("%s#%d", loops[li-1].RunID, loops[li-1].N)
		}
		dash := ""
		if t.dashed {
			dash = ` stroke-dasharray="6 4"`
		}
		for _, seg := range t.segs {
			fmt.Fprintf(w, `<polyline class="trace" data-loop="%s" data-trace="%d" stroke="%s"%s points="`, esc(id), ti, t.col.hex(), dash)
			for k, p := range seg {
				if k > 0 {
					w.WriteByte(' ')
				}
				w.WriteString(f1(p.x))
				w.WriteByte(',')
				w.WriteString(f1(p.y))
			}
			fmt.Fprintln(w, `"/>`)
		}
	}
	if m := s.mark; m != nil {
		if len(m.curve) > 1 {
			fmt.Fprintf(w, `<polyline stroke="%s" stroke-width="1" stroke-dasharray="2 3" points="`, colMark.hex())
			for k, p := range m.curve {
				if k > 0 {
					w.WriteByte(' ')
				}
				fmt.Fprintf(w, "%s,%s", f1(p.x), f1(p.y))
			}
			fmt.Fprintln(w, `"/>`)
		}
		fmt.Fprintf(w, `<circle class="bhmax" cx="%s" cy="%s" r="5" stroke="%s" stroke-width="2"/>`+"\n", f1(m.at.x), f1(m.at.y), colMark.hex())
	}
	fmt.Fprintln(w, `</g>`)
	if m := s.mark; m != nil {
		fmt.Fprintf(w, `<text x="%s" y="%s" fill="%s" text-anchor="%s">%s</text>`+"\n", f1(m.at.x+10), f1(m.at.y-12), colMark.hex(), "start", esc(m.label))
	}

	// Legend, top left inside the plot area.
	lx, ly := s.x0+10, s.y0+16
	for _, t := range s.legend {
		fmt.Fprintf(w, `<line x1="%s" y1="%s" x2="%s" y2="%s" stroke="%s" stroke-width="3"/>`, f1(lx), f1(ly-4), f1(lx+22), f1(ly-4), t.col.hex())
		fmt.Fprintf(w, `<text x="%s" y="%s" fill="%s">%s</text>`+"\n", f1(lx+28), f1(ly), colInk.hex(), esc(t.label))
		ly += 16
	}
	fmt.Fprintln(w, `</svg>`)
}
