package api

import (
	"context"
	"io"
	"net/http"
	"net/url"
	"path"
	"strings"

	"hystd/acq/imports"
	"hystd/acq/record"
	"hystd/calib/loopcsv"
)

// Importer is the optional ability of a Runner to store a raw recording as
// a run (POST /api/v1/imports).
type Importer interface {
	Import(ctx context.Context, fixture, specimen, name string, data []byte) (record.Run, []record.Loop, error)
}

// importReply is the answer of POST /api/v1/imports: the stored run, its
// provenance and, per loop, the keys of `hystd analyze --json`.
type importReply struct {
	RunID      string            `json:"run_id"`
	Provenance string            `json:"provenance"`
	Loops      []loopcsv.Summary `json:"loops"`
}

// importRecording handles POST /api/v1/imports?fixture=F&specimen=S&name=FILE
// with the raw CSV as the body (text/csv).
func (s *server) importRecording(w http.ResponseWriter, r *http.Request) {
	im, ok := s.o.Runner.(Importer)
	if !ok {
		writeError(w, http.StatusServiceUnavailable, "this server cannot import recordings")
		return
	}
	q := r.URL.Query()
	for k := range q {
		if k != "fixture" && k != "specimen" && k != "name" {
			writeError(w, http.StatusBadRequest, "unknown query parameter %q (known: fixture, specimen, name)", k)
			return
		}
	}
	if q.Get("fixture") == "" || q.Get("specimen") == "" {
		writeError(w, http.StatusBadRequest, "?fixture=NAME&specimen=ID are required")
		return
	}
	if ct := r.Header.Get("Content-Type"); ct != "" && !strings.HasPrefix(ct, "text/csv") && !strings.HasPrefix(ct, "text/plain") {
		writeError(w, http.StatusUnsupportedMediaType, "Content-Type %q: send the recording as text/csv", ct)
		return
	}
	body, err := io.ReadAll(r.Body)
	if err != nil {
		s.bodyError(w, err)
		return
	}
	name := path.Base(q.Get("name"))
	if name == "." || name == "/" {
		name = "upload.csv"
	}
	run, loops, err := im.Import(r.Context(), q.Get("fixture"), q.Get("specimen"), name, body)
	if err != nil {
		if le, ok := err.(*loopcsv.Error); ok {
			writeError(w, http.StatusBadRequest, "%v", le)
			return
		}
		s.fail(w, r, err)
		return
	}
	rep := importReply{RunID: run.ID, Provenance: run.RecipeText, Loops: []loopcsv.Summary{}}
	for _, l := range loops {
		rep.Loops = append(rep.Loops, imports.Summary(l))
	}
	s.log.Info("api: recording imported", "run", run.ID, "file", name, "remote", r.RemoteAddr)
	w.Header().Set("Location", "/api/v1/runs/"+url.PathEscape(run.ID))
	writeJSON(w, http.StatusCreated, rep)
}
