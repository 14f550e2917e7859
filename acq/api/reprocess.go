package api

import (
	"context"
	"io"
	"mime"
	"net/http"
	"net/url"
	"strconv"
	"strings"

	"hystd/acq/imports"
	"hystd/acq/record"
	"hystd/calib/loopcsv"
)

// Reprocessor is the optional ability of a Runner to re-process a stored
// run (POST /api/v1/runs/{id}/reprocess): body holds the changed specimen
// and/or fixture as YAML documents, by names who asks. It returns the new
// revision and its loops.
type Reprocessor interface {
	Reprocess(ctx context.Context, runID string, body []byte, by string) (record.Revision, []record.Loop, error)
}

// reprocessReply is the answer of POST /runs/{id}/reprocess.
type reprocessReply struct {
	RunID    string            `json:"run_id"`
	Revision revisionJSON      `json:"revision"`
	Loops    []loopcsv.Summary `json:"loops"` // per loop, the keys of `hystd analyze --json`
}

// reprocess handles POST /api/v1/runs/{id}/reprocess with the specimen
// and/or fixture (application/yaml) that replace the run's.
func (s *server) reprocess(w http.ResponseWriter, r *http.Request) {
	rp, ok := s.o.Runner.(Reprocessor)
	if !ok {
		writeError(w, http.StatusServiceUnavailable, "this server cannot re-process runs")
		return
	}
	ct := r.Header.Get("Content-Type")
	if mt, _, err := mime.ParseMediaType(ct); ct == "" || err != nil || !recipeTypes[mt] {
		writeError(w, http.StatusUnsupportedMediaType, "Content-Type %q: send the specimen and/or fixture documents as application/yaml", ct)
		return
	}
	if len(r.URL.Query()) > 0 {
		writeError(w, http.StatusBadRequest, "no query parameters are known here: send the specimen and/or fixture in the body")
		return
	}
	body, err := io.ReadAll(r.Body)
	if err != nil {
		s.bodyError(w, err)
		return
	}
	if strings.TrimSpace(string(body)) == "" {
		writeError(w, http.StatusBadRequest, "empty body: send a specimen (kind: specimen) and/or a fixture (kind: fixture) document")
		return
	}
	id := r.PathValue("id")
	// Who made the change: the request's authenticated user (the shared
	// token is the user "shared-token"); "unknown" on an open server.
	by := "unknown"
	if u, ok := UserFrom(r.Context()); ok {
		by = u.Name
	}
	v, loops, err := rp.Reprocess(r.Context(), id, body, by)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	rep := reprocessReply{RunID: id, Revision: toRevisions([]record.Revision{v})[0], Loops: []loopcsv.Summary{}}
	for _, l := range loops {
		rep.Loops = append(rep.Loops, imports.Summary(l))
	}
	s.log.Info("api: run re-processed", "run", id, "revision", v.N, "by", by, "remote", r.RemoteAddr)
	w.Header().Set("Location", "/api/v1/runs/"+url.PathEscape(id)+"?revision="+strconv.Itoa(v.N))
	writeJSON(w, http.StatusCreated, rep)
}
