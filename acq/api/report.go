package api

import (
	"bytes"
	"net/http"
	"strconv"
	"time"

	"hystd/acq/report"
)

// report serves a run's test report as PDF (acq/report).
func (s *server) report(w http.ResponseWriter, r *http.Request) {
	if len(r.URL.Query()) > 0 {
		writeError(w, http.StatusBadRequest, "the report takes no query parameters")
		return
	}
	id := r.PathValue("id")
	in, err := report.FromStore(r.Context(), s.o.Reader, id)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	in.Software, in.Generated = s.o.Version, time.Now()
	var buf bytes.Buffer
	if err := report.Write(&buf, in); err != nil {
		s.fail(w, r, err)
		return
	}
	h := w.Header()
	h.Set("Content-Type", "application/pdf")
	h.Set("Content-Length", strconv.Itoa(buf.Len()))
	h.Set("Content-Disposition", `inline; filename="`+safeName(id)+`.pdf"`)
	w.WriteHeader(http.StatusOK)
	_, _ = w.Write(buf.Bytes())
}

// safeName keeps letters, digits, '.', '_' and '-' of a run id for a file name.
func safeName(id string) string {
	b := []byte(id)
	for i, c := range b {
		if !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '.' || c == '_' || c == '-') {
			b[i] = '_'
		}
	}
	return string(b)
}
