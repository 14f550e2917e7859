package api

import (
	"errors"
	"fmt"
	"io"
	"math"
	"mime"
	"net/http"
	"net/url"
	"strconv"
	"strings"
	"time"

	"hystd/acq/calrec"
	"hystd/acq/engine"
	"hystd/acq/plot"
	"hystd/acq/record"
	"hystd/configs"
)

func (s *server) health(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, http.StatusOK, map[string]any{
		"ok":       true,
		"version":  s.o.Version,
		"runner":   s.o.Runner != nil,
		"live":     s.o.Live != nil,
		"mutation": len(s.creds()) > 0,
	})
}

// info tells the page what this daemon can do and the CGS factors from the
// one definition in calib/units, so the page converts nothing on its own.
func (s *server) info(w http.ResponseWriter, r *http.Request) {
	oe, g, mgoe := plot.CGSFactors()
	fixtures := []FixtureStatus{}
	if st, ok := s.o.Runner.(fixtureLister); ok {
		fixtures = append(fixtures, st.Status()...)
	}
	writeJSON(w, http.StatusOK, map[string]any{
		"fixtures":      fixtures,
		"version":       s.o.Version,
		"can_submit":    s.o.Runner != nil && len(s.creds()) > 0,
		"token_set":     len(s.creds()) > 0,
		"protect_reads": s.o.ProtectReads,
		"cgs": map[string]float64{
			"oe_per_a_m":    oe,
			"g_per_t":       g,
			"mgoe_per_j_m3": mgoe,
		},
	})
}

// fixtureLister is a Runner that can list its fixtures (the daemon does).
type fixtureLister interface {
	Status() []FixtureStatus
}

// parseTime accepts RFC 3339 or a date YYYY-MM-DD (UTC). For an end bound a
// bare date means the end of that day.
func parseTime(v string, end bool) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339, v); err == nil {
		return t, inRange(t)
	}
	t, err := time.Parse(time.DateOnly, v)
	if err != nil {
		return time.Time{}, errors.New("want RFC 3339 (2026-12-01T08:00:00Z) or a date (2026-12-01)")
	}
	if end {
		t = t.AddDate(0, 0, 1)
	}
	return t, inRange(t)
}

// Times are stored as Unix nanoseconds, which reach from 1677-09-21 to
// 2262-04-11 (the range of int64 nanoseconds, Go's time.Time.UnixNano).
var (
	minTime = time.Unix(0, math.MinInt64).UTC()
	maxTime = time.Unix(0, math.MaxInt64).UTC()
)

func inRange(t time.Time) error {
	if t.Before(minTime) || t.After(maxTime) {
		return fmt.Errorf("beyond the times a run can have (%s to %s)", minTime.Format(time.DateOnly), maxTime.Format(time.DateOnly))
	}
	return nil
}

func runFilter(q url.Values) (record.RunFilter, error) {
	var f record.RunFilter
	for k := range q {
		switch k {
		case "fixture", "specimen", "material", "state", "since", "until", "limit":
		default:
			return f, errors.New("unknown query parameter " + strconv.Quote(k) + " (known: fixture, specimen, material, state, since, until, limit)")
		}
	}
	f.Fixture, f.Specimen, f.Material = q.Get("fixture"), q.Get("specimen"), q.Get("material")
	if v := q.Get("state"); v != "" {
		switch st := record.State(v); st {
		case record.Queued, record.Running, record.Finished, record.Aborted, record.Failed:
			f.State = st
		default:
			return f, errors.New("state: " + strconv.Quote(v) + " is not one of queued, running, finished, aborted, failed")
		}
	}
	var err error
	if v := q.Get("since"); v != "" {
		if f.Since, err = parseTime(v, false); err != nil {
			return f, errors.New("since: " + strconv.Quote(v) + ": " + err.Error())
		}
	}
	if v := q.Get("until"); v != "" {
		if f.Until, err = parseTime(v, true); err != nil {
			return f, errors.New("until: " + strconv.Quote(v) + ": " + err.Error())
		}
	}
	if v := q.Get("limit"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 1 || n > 10000 {
			return f, errors.New("limit: " + strconv.Quote(v) + " is not a whole number from 1 to 10000")
		}
		f.Limit = n
	}
	return f, nil
}

func (s *server) listRuns(w http.ResponseWriter, r *http.Request) {
	f, err := runFilter(r.URL.Query())
	if err != nil {
		writeError(w, http.StatusBadRequest, "%v", err)
		return
	}
	runs, err := s.o.Reader.Runs(r.Context(), f)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	out := make([]runJSON, 0, len(runs))
	for _, run := range runs {
		j := toRun(run, false)
		if ls, err := s.o.Reader.Loops(r.Context(), run.ID); err == nil {
			var vs []record.Verdict
			for _, l := range ls {
				vs = append(vs, l.Verdicts...)
			}
			j.Verdict = string(record.Worst(vs))
		}
		out = append(out, j)
	}
	writeJSON(w, http.StatusOK, map[string]any{"runs": out})
}

// revisionParam reads ?revision=N (N ≥ 1; absent: 0, the latest).
func revisionParam(w http.ResponseWriter, r *http.Request) (int, bool) {
	v := r.URL.Query().Get("revision")
	if v == "" {
		return 0, true
	}
	n, err := strconv.Atoi(v)
	if err != nil || n < 1 {
		writeError(w, http.StatusBadRequest, "revision: %q: want a whole number from 1", v)
		return 0, false
	}
	return n, true
}

// runAt returns run id as revision rev (0: the latest) shows it, with the
// list of its revisions.
func (s *server) runAt(r *http.Request, id string, rev int) (record.Run, []record.Revision, int, error) {
	run, err := s.o.Reader.Run(r.Context(), id)
	if err != nil {
		return record.Run{}, nil, 0, err
	}
	revs, err := s.o.Reader.Revisions(r.Context(), id)
	if err != nil {
		return record.Run{}, nil, 0, err
	}
	if rev == 0 {
		rev = len(revs)
	}
	if rev > len(revs) {
		return record.Run{}, nil, 0, fmt.Errorf("run %s revision %d (it has %d): %w", id, rev, len(revs), record.ErrNotFound)
	}
	return run.At(revs[rev-1]), revs, rev, nil
}

func (s *server) getRun(w http.ResponseWriter, r *http.Request) {
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
	loops, err := s.o.Reader.LoopsOf(r.Context(), id, rev)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	evs, err := s.o.Reader.Events(r.Context(), id)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	// flags: what a reviewer must see first — the specimen geometry's
	// warnings (events the engine recorded) and every implausible loop.
	flags := []string{}
	ej := make([]eventJSON, 0, len(evs))
	abortedBy := ""
	for _, e := range evs {
		ej = append(ej, eventJSON{stamp(e.At), e.Level, e.Text})
		if e.Level == "warn" && (strings.HasPrefix(e.Text, "geometry of specimen ") || strings.HasPrefix(e.Text, "calibration ")) {
			flags = append(flags, e.Text)
		}
		if name, ok := actionBy(e.Text, ActionAbort); ok {
			abortedBy = name
		}
	}
	cals := calrec.Listed(evs)
	if cals == nil {
		cals = []string{}
	}
	lj := make([]loopJSON, 0, len(loops))
	for _, l := range loops {
		j := toLoop(l, false, false)
		for _, f := range j.Flags {
			flags = append(flags, fmt.Sprintf("loop %d: %s", l.N, f))
		}
		lj = append(lj, j)
	}
	rj := toRun(run, true)
	rj.Revision, rj.Revisions = rev, toRevisions(revs)
	writeJSON(w, http.StatusOK, map[string]any{"run": rj, "loops": lj, "events": ej, "flags": flags,
		"calibrations": cals, "aborted_by": abortedBy})
}

func (s *server) getLoop(w http.ResponseWriter, r *http.Request) {
	id := r.PathValue("id")
	n, err := strconv.Atoi(r.PathValue("n"))
	if err != nil || n < 1 {
		writeError(w, http.StatusBadRequest, "loop number %q: want a whole number from 1", r.PathValue("n"))
		return
	}
	raw := false
	switch v := r.URL.Query().Get("raw"); v {
	case "", "0", "false":
	case "1", "true":
		raw = true
	default:
		writeError(w, http.StatusBadRequest, "raw: %q: want 1 or 0", v)
		return
	}
	maxPts := 0
	if v := r.URL.Query().Get("max_points"); v != "" {
		if maxPts, err = strconv.Atoi(v); err != nil || maxPts < 2 {
			writeError(w, http.StatusBadRequest, "max_points: %q: want a whole number from 2", v)
			return
		}
	}
	rev, ok := revisionParam(w, r)
	if !ok {
		return
	}
	l, err := s.o.Reader.LoopOf(r.Context(), id, n, rev)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	stride, total := 1, len(l.Points)
	if maxPts > 0 && len(l.Points) > maxPts {
		stride = (len(l.Points) - 1 + maxPts - 2) / (maxPts - 1) // ⌈(n−1)/(max−1)⌉
		l.Points = thin(l.Points, stride)
	}
	lj := toLoop(l, true, raw)
	lj.Stride, lj.NPoints = stride, total
	writeJSON(w, http.StatusOK, map[string]any{"loop": lj})
}

// thin keeps every stride-th point and the last one.
func thin(ps []record.Point, stride int) []record.Point {
	out := make([]record.Point, 0, len(ps)/stride+2)
	for i := 0; i < len(ps); i += stride {
		out = append(out, ps[i])
	}
	if (len(ps)-1)%stride != 0 {
		out = append(out, ps[len(ps)-1])
	}
	return out
}

func (s *server) trend(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	spec, fig := q.Get("specimen"), q.Get("figure")
	if spec == "" || fig == "" {
		writeError(w, http.StatusBadRequest, "specimen and figure are required, e.g. ?specimen=R-17&figure=HcB")
		return
	}
	var since time.Time
	if v := q.Get("since"); v != "" {
		var err error
		if since, err = parseTime(v, false); err != nil {
			writeError(w, http.StatusBadRequest, "since: %q: %v", v, err)
			return
		}
	}
	tf, err := parseTrendFilter(q)
	if err != nil {
		writeError(w, http.StatusBadRequest, "%v", err)
		return
	}
	pts, err := s.o.Reader.Trend(r.Context(), spec, fig, since)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	if tf.active() {
		s.filteredTrend(w, r, spec, fig, tf, pts)
		return
	}
	out := make([]trendJSON, 0, len(pts))
	for _, p := range pts {
		out = append(out, trendJSON{RunID: p.RunID, Loop: p.Loop, At: stamp(p.At), Value: num(p.Value), U: num(p.U)})
	}
	writeJSON(w, http.StatusOK, map[string]any{"specimen": spec, "figure": fig, "points": out})
}

// recipeTypes are the content types a recipe may be sent as.
// recipeTypes are the media types a submitted recipe may be sent as.
var recipeTypes = map[string]bool{
	"application/yaml": true, "application/x-yaml": true, "text/yaml": true, "text/x-yaml": true,
}

func (s *server) submit(w http.ResponseWriter, r *http.Request) {
	if s.o.Runner == nil {
		writeError(w, http.StatusServiceUnavailable, "this server only reviews a store; it runs no fixture")
		return
	}
	ct := r.Header.Get("Content-Type")
	if ct == "" {
		writeError(w, http.StatusUnsupportedMediaType, "no Content-Type: send the recipe with Content-Type: application/yaml")
		return
	}
	if mt, _, err := mime.ParseMediaType(ct); err != nil || !recipeTypes[mt] {
		writeError(w, http.StatusUnsupportedMediaType, "Content-Type %q: send the recipe as application/yaml", ct)
		return
	}
	for k := range r.URL.Query() {
		if k != "fixture" && k != "specimen" {
			writeError(w, http.StatusBadRequest, "unknown query parameter %q (known: fixture, specimen)", k)
			return
		}
	}
	body, err := io.ReadAll(r.Body)
	if err != nil {
		s.bodyError(w, err)
		return
	}
	if strings.TrimSpace(string(body)) == "" {
		writeError(w, http.StatusBadRequest, "empty body: send the recipe file (YAML, kind: recipe)")
		return
	}
	id, err := s.submitRecipe(r, body)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	s.log.Info("api: recipe submitted", "run", id, "remote", r.RemoteAddr)
	w.Header().Set("Location", "/api/v1/runs/"+url.PathEscape(id))
	writeJSON(w, http.StatusAccepted, map[string]string{"run_id": id, "state": string(record.Queued)})
}

func (s *server) abort(w http.ResponseWriter, r *http.Request) {
	if s.o.Runner == nil {
		writeError(w, http.StatusServiceUnavailable, "this server only reviews a store; it runs no fixture")
		return
	}
	id := r.PathValue("id")
	if err := s.o.Runner.Abort(r.Context(), id); err != nil {
		s.fail(w, r, err)
		return
	}
	s.log.Info("api: abort requested", "run", id, "remote", r.RemoteAddr)
	writeJSON(w, http.StatusAccepted, map[string]string{"run_id": id, "state": "aborting"})
}

func (s *server) bodyError(w http.ResponseWriter, err error) {
	var mbe *http.MaxBytesError
	if errors.As(err, &mbe) {
		writeError(w, http.StatusRequestEntityTooLarge, "request body larger than %d bytes", mbe.Limit)
		return
	}
	writeError(w, http.StatusBadRequest, "reading the request body: %v", err)
}

// badRequest is implemented by errors that are the client's fault.
type badRequest interface{ BadRequest() bool }

// fail maps an error from the Reader or the Runner to a status code. Besides
// this package's markers it knows the daemon's and the engine's errors: a
// refused recipe, an unknown fixture or no fixture named on a daemon with
// several is the client's (400), a full queue or a run that is no longer
// active a conflict (409), a stopping daemon 503.
func (s *server) fail(w http.ResponseWriter, r *http.Request, err error) {
	var ce *configs.Error
	var br badRequest
	var refused *engine.Refused
	switch {
	case errors.Is(err, record.ErrNotFound):
		writeError(w, http.StatusNotFound, "%v", err)
	case errors.Is(err, ErrInvalid), errors.As(err, &ce), errors.As(err, &refused),
		errors.Is(err, ErrUnknownFixture), errors.Is(err, ErrFixtureNeeded), errors.Is(err, ErrUnknownSpecimen),
		errors.As(err, &br) && br.BadRequest():
		writeError(w, http.StatusBadRequest, "%v", err)
	case errors.Is(err, ErrNotActive):
		// Unknown to the store as well: 404; a run that has ended: 409.
		if _, rerr := s.o.Reader.Run(r.Context(), r.PathValue("id")); errors.Is(rerr, record.ErrNotFound) {
			writeError(w, http.StatusNotFound, "run %s: %v", r.PathValue("id"), rerr)
			return
		}
		writeError(w, http.StatusConflict, "%v", err)
	case errors.Is(err, ErrConflict), errors.Is(err, ErrQueueFull), errors.Is(err, ErrNotWaiting):
		writeError(w, http.StatusConflict, "%v", err)
	case errors.Is(err, ErrStopping):
		writeError(w, http.StatusServiceUnavailable, "%v", err)
	case r.Context().Err() != nil:
		writeError(w, http.StatusServiceUnavailable, "request cancelled or timed out: %v", err)
	default:
		s.log.Error("api: request failed", "path", r.URL.Path, "err", err)
		writeError(w, http.StatusInternalServerError, "%v", err)
	}
}
