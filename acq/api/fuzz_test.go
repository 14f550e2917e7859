package api

import (
	"net/url"
	"testing"
	"time"
)

// FuzzRunFilter: any query string either gives a filter within its bounds
// or an error naming a parameter; it never panics.
func FuzzRunFilter(f *testing.F) {
	for _, s := range []string{"", "state=running", "since=2026-12-01&until=2026-12-02T00:00:00Z",
		"limit=10000", "limit=0", "fixture=%00", "since=2026-02-30", "until=9999-12-31", "since=2262-04-12", "since=1677-09-20T00:00:00Z", "x=1"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		q, err := url.ParseQuery(s)
		if err != nil {
			return
		}
		rf, err := runFilter(q)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error message")
			}
			return
		}
		for _, tm := range []time.Time{rf.Since, rf.Until} {
			if !tm.IsZero() && time.Unix(0, tm.UnixNano()).Compare(tm) != 0 {
				t.Fatalf("time %s from %q does not fit in Unix nanoseconds", tm, s)
			}
		}
		if rf.Limit < 0 || rf.Limit > 10000 {
			t.Fatalf("limit %d out of range from %q", rf.Limit, s)
		}
		if rf.State != "" && !map[string]bool{"queued": true, "running": true, "finished": true, "aborted": true, "failed": true}[string(rf.State)] {
			t.Fatalf("state %q accepted from %q", rf.State, s)
		}
	})
}
