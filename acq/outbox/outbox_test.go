package outbox_test

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"hystd/acq/outbox"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

func TestRequeue(t *testing.T) {
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(t.TempDir(), "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	for _, id := range []string{"run-a", "run-b"} {
		if err := st.CreateRun(ctx, storetest.SampleRun(id, t0)); err != nil {
			t.Fatal(err)
		}
		for n := 1; n <= 2; n++ {
			if err := st.AddLoop(ctx, storetest.SampleLoop(id, n, 10, t0)); err != nil {
				t.Fatal(err)
			}
		}
	}
	pend, err := st.Pending(ctx, 0)
	if err != nil || len(pend) != 4 {
		t.Fatalf("pending %d, %v", len(pend), err)
	}
	for _, e := range pend {
		if err := st.Quarantine(ctx, e.ID, "HTTP 400: unsupported path"); err != nil {
			t.Fatal(err)
		}
	}
	tests := []struct {
		name    string
		run     string
		want    int
		wantErr error
	}{
		{"one run", "run-a", 2, nil},
		{"the same run again", "run-a", 0, outbox.ErrNothing},
		{"unknown run", "run-x", 0, record.ErrNotFound},
		{"all the rest", "", 2, nil},
		{"nothing left", "", 0, outbox.ErrNothing},
	}
	for _, tc := range tests {
		got, err := outbox.Requeue(ctx, st, tc.run)
		if len(got) != tc.want || !errors.Is(err, tc.wantErr) {
			t.Errorf("%s: requeued %d (%v), want %d (%v)", tc.name, len(got), err, tc.want, tc.wantErr)
		}
	}
	if q, _ := outbox.List(ctx, st); len(q) != 0 {
		t.Errorf("%d still quarantined", len(q))
	}
	if p, _ := st.Pending(ctx, 0); len(p) != 4 {
		t.Errorf("%d pending after requeue, want 4", len(p))
	}
}
