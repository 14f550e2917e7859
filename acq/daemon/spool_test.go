package daemon

import (
	"bytes"
	"context"
	"encoding/gob"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

// TestReplaySpool: a spooled loop is committed and its file removed; one the
// store already holds counts as committed (file removed, logged at info);
// a loop of a run the store does not know and an unreadable file are kept.
func TestReplaySpool(t *testing.T) {
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(t.TempDir(), "s.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	t0 := time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC)
	if err := st.CreateRun(ctx, storetest.SampleRun("run-s", t0)); err != nil {
		t.Fatal(err)
	}
	held := storetest.SampleLoop("run-s", 1, 40, t0)
	if err := st.AddLoop(ctx, held); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	spoolFile := func(name string, l record.Loop) {
		var b bytes.Buffer
		if err := gob.NewEncoder(&b).Encode(l); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, name), b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	spoolFile("run-s-loop001.gob", held)
	spoolFile("run-s-loop002.gob", storetest.SampleLoop("run-s", 2, 40, t0.Add(time.Minute)))
	spoolFile("run-x-loop001.gob", storetest.SampleLoop("run-x", 1, 40, t0))
	if err := os.WriteFile(filepath.Join(dir, "broken-loop001.gob"), []byte("not gob"), 0o644); err != nil {
		t.Fatal(err)
	}
	var logs bytes.Buffer
	ReplaySpool(ctx, dir, st, slog.New(slog.NewTextHandler(&logs, nil)))

	for _, tc := range []struct {
		file string
		kept bool
		log  string
	}{
		{"run-s-loop001.gob", false, "level=INFO msg=\"spooled loop already in the store; spool file removed\""},
		{"run-s-loop002.gob", false, "level=INFO msg=\"spooled loop committed\""},
		{"run-x-loop001.gob", true, "level=ERROR msg=\"spooled loop not committed; kept\""},
		{"broken-loop001.gob", true, "level=ERROR msg=\"spooled loop not committed; kept\""},
	} {
		_, err := os.Stat(filepath.Join(dir, tc.file))
		if kept := err == nil; kept != tc.kept {
			t.Errorf("%s: kept %v, want %v", tc.file, kept, tc.kept)
		}
		found := false
		for _, line := range strings.Split(logs.String(), "\n") {
			if strings.Contains(line, tc.log) && strings.Contains(line, tc.file) {
				found = true
			}
		}
		if !found {
			t.Errorf("%s: no log line with %s in\n%s", tc.file, tc.log, logs.String())
		}
	}
	loops, err := st.Loops(ctx, "run-s")
	if err != nil {
		t.Fatal(err)
	}
	if len(loops) != 2 {
		t.Errorf("run-s has %d loops stored, want 2", len(loops))
	}
	got, err := st.Loop(ctx, "run-s", 1)
	if err != nil {
		t.Fatal(err)
	}
	if d := storetest.SameLoop(got, held); d != "" {
		t.Errorf("loop 1 changed by the replay: %s", d)
	}
}
