package daemon

import (
	"context"
	"log/slog"
	"path/filepath"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store"
)

// TestRecoverRuns: runs a killed daemon left running or queued get a final
// state and reason at the next start; ended runs are left alone.
func TestRecoverRuns(t *testing.T) {
	ctx := context.Background()
	cfg, err := Load(writeConfig(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures))
	if err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(ctx, filepath.Join(t.TempDir(), "s.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	at := time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC)
	for _, r := range []record.Run{
		{ID: "a", Fixture: "aldermoor-ring-2", State: record.Running, Queued: at, Started: at},
		{ID: "b", Fixture: "aldermoor-ring-2", State: record.Queued, Queued: at},
		{ID: "c", Fixture: "aldermoor-ring-2", State: record.Finished, Queued: at, Started: at, Ended: at},
		{ID: "d", Fixture: "another-fixture", State: record.Running, Queued: at, Started: at},
	} {
		if err := st.CreateRun(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	RecoverRuns(ctx, cfg, st, st, slog.New(slog.DiscardHandler))
	want := map[string]record.State{"a": record.Failed, "b": record.Aborted, "c": record.Finished, "d": record.Running}
	for id, s := range want {
		r, err := st.Run(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		if r.State != s {
			t.Errorf("run %s: %s (%q), want %s", id, r.State, r.Reason, s)
		}
		if s == record.Failed && r.Reason == "" {
			t.Errorf("run %s has no reason", id)
		}
	}
}
