package api

import (
	"encoding/json"
	"fmt"
	"net/http"
	"time"

	"hystd/acq/live"
)

// events streams live events as server-sent events: one "event: KIND" with
// a JSON "data:" line per event, a comment line every Heartbeat, and a
// first "event: hello". ?run=ID keeps only that run's events.
func (s *server) events(w http.ResponseWriter, r *http.Request) {
	if n := s.streams.Add(1); n > int64(s.o.MaxStreams) {
		s.streams.Add(-1)
		writeError(w, http.StatusServiceUnavailable, "too many open event streams (%d); close one and retry", s.o.MaxStreams)
		return
	}
	defer s.streams.Add(-1)
	only := r.URL.Query().Get("run")
	rc := http.NewResponseController(w)
	// The server's write timeout must not cut a stream that lives for hours:
	// an expired write deadline fails the next write. (The read deadline
	// is already lifted by net/http for a request without a body, while it
	// watches the connection for the client going away.)
	_ = rc.SetWriteDeadline(time.Time{})
	w.Header().Set("Content-Type", "text/event-stream")
	w.Header().Set("Cache-Control", "no-cache")
	w.Header().Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)
	fmt.Fprintf(w, "retry: 3000\nevent: hello\ndata: {\"live\":%t}\n\n", s.o.Live != nil)
	if err := rc.Flush(); err != nil {
		return
	}
	var ch <-chan live.Event
	if s.o.Live != nil {
		var cancel func()
		ch, cancel = s.o.Live.Subscribe()
		defer cancel()
	}
	tick, stop := s.ticker(s.o.Heartbeat)
	defer stop()
	for {
		select {
		case <-r.Context().Done():
			return
		case <-tick:
			if _, err := fmt.Fprint(w, ": keep-alive\n\n"); err != nil {
				return
			}
		case ev, ok := <-ch:
			if !ok {
				return
			}
			if only != "" && ev.RunID != only {
				continue
			}
			b, err := json.Marshal(ev)
			if err != nil { // a NaN from the engine: skip that one event
				s.log.Warn("api: live event not encodable", "kind", ev.Kind, "err", err)
				continue
			}
			if _, err := fmt.Fprintf(w, "event: %s\ndata: %s\n\n", ev.Kind, b); err != nil {
				return
			}
		}
		if err := rc.Flush(); err != nil {
			return
		}
	}
}

// realTicker is the heartbeat clock outside tests.
func realTicker(d time.Duration) (<-chan time.Time, func()) {
	t := time.NewTicker(d)
	return t.C, t.Stop
}
