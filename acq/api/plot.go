package api

import (
	"bytes"
	"fmt"
	"net/http"
	"strconv"

	"hystd/acq/export"
	"hystd/acq/plot"
	"hystd/acq/record"
)

// Bounds of a drawing: each side in pixels, and drawings at once. A PNG of
// 2000×2000 holds 16 MB of pixels; 2 at once bound the memory plots take.
const (
	MinPlotSide = 200
	MaxPlotSide = 2000
	MaxRenders  = 2
)

// plotLoop draws one loop server-side with acq/plot, the same drawing as
// `hystd export --format svg|png`:
// ?format=svg|png &y=B|J &units=si|cgs &quadrant=2 &width=&height= (pixels).
// The image is drawn into memory first, so a failure is a JSON error, never
// half an image.
func (s *server) plotLoop(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	for k := range q {
		switch k {
		case "format", "y", "units", "quadrant", "width", "height", "revision":
		default:
			writeError(w, http.StatusBadRequest, "unknown query parameter %q (known: format, y, units, quadrant, width, height, revision)", k)
			return
		}
	}
	format := q.Get("format")
	switch format {
	case "", "svg":
		format = "svg"
	case "png":
	default:
		writeError(w, http.StatusBadRequest, "format: %q: want svg or png", format)
		return
	}
	o, err := export.PlotStyle{Y: q.Get("y"), Units: q.Get("units"), Quadrant: q.Get("quadrant")}.Options()
	if err != nil {
		writeError(w, http.StatusBadRequest, "%v", err)
		return
	}
	for _, d := range []struct {
		key string
		dst *int
	}{{"width", &o.Width}, {"height", &o.Height}} {
		if v := q.Get(d.key); v != "" {
			n, err := strconv.Atoi(v)
			if err != nil || n < MinPlotSide || n > MaxPlotSide {
				writeError(w, http.StatusBadRequest, "%s: %q: want a whole number of pixels from %d to %d", d.key, v, MinPlotSide, MaxPlotSide)
				return
			}
			*d.dst = n
		}
	}
	n, err := strconv.Atoi(r.PathValue("n"))
	if err != nil || n < 1 {
		writeError(w, http.StatusBadRequest, "loop number %q: want a whole number from 1", r.PathValue("n"))
		return
	}
	id := r.PathValue("id")
	rev, ok := revisionParam(w, r)
	if !ok {
		return
	}
	run, revs, rev, err := s.runAt(r, id, rev)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	l, err := s.o.Reader.LoopOf(r.Context(), id, n, rev)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	o.Title = fmt.Sprintf("%s loop %d — %s, %s", run.ID, l.N, run.Specimen, run.Material)
	if len(revs) > 1 {
		o.Title += fmt.Sprintf(" (revision %d)", rev)
	}
	o.Labels = []string{fmt.Sprintf("%s #%d", run.Specimen, l.N)}
	// At most MaxRenders drawings at once; a request waits for its turn
	// until its own timeout, then gets 503.
	select {
	case s.renders <- struct{}{}:
		defer func() { <-s.renders }()
	case <-r.Context().Done():
		writeError(w, http.StatusServiceUnavailable, "too many plots being drawn at once (%d); try again", cap(s.renders))
		return
	}
	var buf bytes.Buffer
	ctype := "image/svg+xml"
	if format == "png" {
		ctype = "image/png"
		err = plot.PNG(&buf, []record.Loop{l}, o)
	} else {
		err = plot.SVG(&buf, []record.Loop{l}, o)
	}
	if err != nil {
		writeError(w, http.StatusUnprocessableEntity, "%v", err)
		return
	}
	w.Header().Set("Content-Type", ctype)
	w.Header().Set("Content-Disposition", fmt.Sprintf("inline; filename=%q", fmt.Sprintf("%s-loop%d.%s", run.ID, l.N, format)))
	_, _ = w.Write(buf.Bytes())
}
