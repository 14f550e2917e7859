package api

import (
	"context"
	"net/http"
	"sync"
	"testing"

	"hystd/acq/store"
)

// fakeOutbox holds quarantined entries in memory.
type fakeOutbox struct {
	mu sync.Mutex
	q  []store.OutboxEntry
}

func (f *fakeOutbox) Quarantined(context.Context, int) ([]store.OutboxEntry, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	var out []store.OutboxEntry
	for _, e := range f.q {
		if e.State == "quarantined" {
			out = append(out, e)
		}
	}
	return out, nil
}

func (f *fakeOutbox) Requeue(_ context.Context, id int64) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	for i := range f.q {
		if f.q[i].ID == id {
			f.q[i].State = "pending"
		}
	}
	return nil
}

func TestOutboxEndpoints(t *testing.T) {
	ob := &fakeOutbox{q: []store.OutboxEntry{
		{ID: 1, RunID: "RUN-A", Loop: 1, State: "quarantined", LastError: "HTTP 400: unsupported path requested: /insrt/0/influx/api/v2/write"},
		{ID: 2, RunID: "RUN-A", Loop: 2, State: "quarantined", LastError: "HTTP 400: unsupported path"},
		{ID: 3, RunID: "RUN-B", Loop: 1, State: "quarantined", LastError: "HTTP 400: unsupported path"},
	}}
	e := newEnv(t, Options{Token: testToken, Outbox: ob})
	code, m, _ := e.do(t, "GET", "/api/v1/outbox", "", "", nil)
	if code != http.StatusOK || len(m["quarantined"].([]any)) != 3 {
		t.Fatalf("GET /api/v1/outbox: %d %v", code, m)
	}
	first := m["quarantined"].([]any)[0].(map[string]any)
	if first["run_id"] != "RUN-A" || first["reason"] != ob.q[0].LastError {
		t.Errorf("first entry %v", first)
	}
	tests := []struct {
		name, query, token string
		want, left         int
	}{
		{"no token", "?run=RUN-A", "", http.StatusUnauthorized, 3},
		{"neither run nor all", "", testToken, http.StatusBadRequest, 3},
		{"both", "?run=RUN-A&all=true", testToken, http.StatusBadRequest, 3},
		{"unknown parameter", "?rn=RUN-A", testToken, http.StatusBadRequest, 3},
		{"unknown run", "?run=RUN-X", testToken, http.StatusNotFound, 3},
		{"one run", "?run=RUN-A", testToken, http.StatusOK, 1},
		{"all", "?all=true", testToken, http.StatusOK, 0},
		{"nothing left", "?all=true", testToken, http.StatusNotFound, 0},
	}
	for _, tc := range tests {
		code, m, _ := e.do(t, "POST", "/api/v1/outbox/requeue"+tc.query, tc.token, "", nil)
		if code != tc.want {
			t.Errorf("%s: HTTP %d %v, want %d", tc.name, code, m, tc.want)
		}
		if q, _ := ob.Quarantined(context.Background(), 0); len(q) != tc.left {
			t.Errorf("%s: %d quarantined left, want %d", tc.name, len(q), tc.left)
		}
	}
}
