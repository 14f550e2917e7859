package api

import (
	"errors"
	"fmt"
	"net/http"
	"time"

	"hystd/acq/outbox"
	"hystd/acq/store"
)

type outboxEntryJSON struct {
	RunID    string    `json:"run_id"`
	Loop     int       `json:"loop"`
	Since    time.Time `json:"since"`
	Attempts int       `json:"attempts"`
	Reason   string    `json:"reason"`
}

func outboxJSON(es []store.OutboxEntry) []outboxEntryJSON {
	out := make([]outboxEntryJSON, 0, len(es))
	for _, e := range es {
		out = append(out, outboxEntryJSON{RunID: e.RunID, Loop: e.Loop, Since: e.Updated.UTC(), Attempts: e.Attempts, Reason: e.LastError})
	}
	return out
}

// outboxList is GET /api/v1/outbox: the loops the time-series server
// refused for good, with its reason. Without an outbox (a review server over
// a copied store) the list is empty.
func (s *server) outboxList(w http.ResponseWriter, r *http.Request) {
	if s.o.Outbox == nil {
		writeJSON(w, http.StatusOK, map[string]any{"quarantined": []outboxEntryJSON{}})
		return
	}
	q, err := outbox.List(r.Context(), s.o.Outbox)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	writeJSON(w, http.StatusOK, map[string]any{"quarantined": outboxJSON(q)})
}

// outboxRequeue is POST /api/v1/outbox/requeue?run=ID (or ?all=true): the
// quarantined loops become pending and the forwarder sends them again.
func (s *server) outboxRequeue(w http.ResponseWriter, r *http.Request) {
	if s.o.Outbox == nil {
		writeError(w, http.StatusServiceUnavailable, "this server has no outbox (no daemon store)")
		return
	}
	q := r.URL.Query()
	for k := range q {
		if k != "run" && k != "all" {
			writeError(w, http.StatusBadRequest, "unknown query parameter %q (known: run, all)", k)
			return
		}
	}
	run, all := q.Get("run"), q.Get("all")
	if (run == "") == (all != "true") || (all != "" && all != "true") {
		writeError(w, http.StatusBadRequest, "give either ?run=ID or ?all=true")
		return
	}
	done, err := outbox.Requeue(r.Context(), s.o.Outbox, run)
	if errors.Is(err, outbox.ErrNothing) {
		writeError(w, http.StatusNotFound, "%v", err)
		return
	}
	if err != nil {
		s.fail(w, r, err)
		return
	}
	if rec, ok := s.o.Runner.(ActionRecorder); ok {
		per := map[string]int{}
		var runs []string
		for _, e := range done {
			if per[e.RunID] == 0 {
				runs = append(runs, e.RunID)
			}
			per[e.RunID]++
		}
		for _, id := range runs {
			if err := rec.RecordAction(r.Context(), id, fmt.Sprintf("%d quarantined loop(s) requeued for the time-series database", per[id])); err != nil {
				s.log.Error("api: requeue not recorded with the run", "run", id, "err", err)
			}
		}
	}
	s.log.Info("api: quarantined loops requeued", "run", run, "loops", len(done), "remote", r.RemoteAddr)
	writeJSON(w, http.StatusOK, map[string]any{"requeued": outboxJSON(done)})
}
