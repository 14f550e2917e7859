package main

import (
	"context"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

// TestCompletions asks cobra's hidden __complete command, as the shells'
// scripts do, for flag values and run ids.
func TestCompletions(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(dir, "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	if err := st.CreateRun(ctx, storetest.SampleRun("RUN-COMPLETE-1", time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC))); err != nil {
		t.Fatal(err)
	}
	st.Close()
	tests := []struct {
		args []string
		want []string
	}{
		{[]string{"__complete", "export", "--format", ""}, []string{"csv", "json", "lp", "svg", "png"}},
		{[]string{"__complete", "export", "--y", ""}, []string{"B", "J"}},
		{[]string{"__complete", "export", "--units", ""}, []string{"si", "cgs"}},
		{[]string{"__complete", "export", "--data", dir, ""}, []string{"RUN-COMPLETE-1"}},
		{[]string{"__complete", "outbox", "requeue", "--data", dir, ""}, []string{"RUN-COMPLETE-1"}},
		{[]string{"__complete", "demo", "--influx-api", ""}, []string{"v2", "v1"}},
		{[]string{"__complete", "analyze", "--h-unit", ""}, []string{"A/m", "kA/m", "Oe", "kOe"}},
	}
	for _, tc := range tests {
		out, errs, code := runCmd(t, tc.args...)
		if code != 0 {
			t.Errorf("%v: exit %d: %s", tc.args, code, errs)
			continue
		}
		for _, w := range tc.want {
			if !strings.Contains(out, "\n"+w) && !strings.HasPrefix(out, w) {
				t.Errorf("%v: %q not offered:\n%s", tc.args, w, out)
			}
		}
	}
}
