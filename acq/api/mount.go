package api

import (
	"context"
	"fmt"
	"net/http"
)

// SpecimenRunner is a Runner that can run a recipe on a chosen specimen
// (POST /api/v1/runs?specimen=ID).
type SpecimenRunner interface {
	SubmitFor(ctx context.Context, fixture, specimen string, recipeYAML []byte) (runID string, err error)
}

// Mounter is a Runner whose queued runs may wait for their specimen to be
// mounted (GET /api/v1/mounts, POST /api/v1/runs/{id}/mount).
type Mounter interface {
	ConfirmMount(ctx context.Context, runID string) error
	Waiting() []MountWait
}

// SpecimenLister is a Runner that knows its specimen registry (GET /api/v1/specimens).
type SpecimenLister interface {
	SpecimenIDs() []string
}

func (s *server) submitRecipe(r *http.Request, body []byte) (string, error) {
	fixture, specimen := r.URL.Query().Get("fixture"), r.URL.Query().Get("specimen")
	if specimen == "" {
		return s.o.Runner.Submit(r.Context(), fixture, body)
	}
	sr, ok := s.o.Runner.(SpecimenRunner)
	if !ok {
		return "", badRequestf("this server cannot choose a specimen (?specimen=%s)", specimen)
	}
	return sr.SubmitFor(r.Context(), fixture, specimen, body)
}

func (s *server) confirmMount(w http.ResponseWriter, r *http.Request) {
	m, ok := s.o.Runner.(Mounter)
	if !ok {
		writeError(w, http.StatusServiceUnavailable, "this server runs no fixture")
		return
	}
	id := r.PathValue("id")
	if err := m.ConfirmMount(r.Context(), id); err != nil {
		s.fail(w, r, err)
		return
	}
	s.log.Info("api: specimen mount confirmed", "run", id, "remote", r.RemoteAddr)
	writeJSON(w, http.StatusOK, map[string]string{"run_id": id, "mount": "confirmed"})
}

func (s *server) listMounts(w http.ResponseWriter, r *http.Request) {
	out := []MountWait{}
	if m, ok := s.o.Runner.(Mounter); ok {
		if ws := m.Waiting(); ws != nil {
			out = ws
		}
	}
	writeJSON(w, http.StatusOK, out)
}

func (s *server) listSpecimens(w http.ResponseWriter, r *http.Request) {
	out := []string{}
	if l, ok := s.o.Runner.(SpecimenLister); ok {
		if ids := l.SpecimenIDs(); ids != nil {
			out = ids
		}
	}
	writeJSON(w, http.StatusOK, out)
}

// clientError is a request problem the client must fix (400).
type clientError struct{ msg string }

func (e clientError) Error() string    { return e.msg }
func (e clientError) BadRequest() bool { return true }

func badRequestf(format string, args ...any) error {
	return clientError{fmt.Sprintf(format, args...)}
}
