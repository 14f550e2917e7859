package daemon

import (
	"encoding/json"
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// Handler serves GET /healthz (the daemon's fixtures and queues; 503 while
// stopping) and everything else from api (the HTTP API and review page,
// which serves the daemon's metrics at /metrics with its own). Without an
// api it serves GET /metrics itself.
func (d *Daemon) Handler(api http.Handler) http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /healthz", d.healthz)
	if api != nil {
		mux.Handle("/", api)
	} else {
		mux.Handle("GET /metrics", promhttp.HandlerFor(d.metrics.Registry, promhttp.HandlerOpts{ErrorHandling: promhttp.ContinueOnError}))
	}
	return mux
}

// Health is the body of /healthz.
type Health struct {
	Status   string          `json:"status"` // "ok" or "stopping"
	Config   string          `json:"config"`
	LoadedAt time.Time       `json:"config_loaded_at"`
	Fixtures []FixtureStatus `json:"fixtures"`
}

func (d *Daemon) healthz(w http.ResponseWriter, r *http.Request) {
	cfg := d.cfg.Load()
	h := Health{Status: "ok", Config: cfg.File, LoadedAt: cfg.LoadedAt, Fixtures: d.Status()}
	d.mu.Lock()
	stopping := d.stopping
	d.mu.Unlock()
	code := http.StatusOK
	if stopping {
		h.Status, code = "stopping", http.StatusServiceUnavailable
	}
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	_ = json.NewEncoder(w).Encode(h)
}
