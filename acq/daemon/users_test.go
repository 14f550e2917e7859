package daemon

import (
	"context"
	"strings"
	"testing"

	"hystd/acq/api"
	"hystd/acq/record"
)

// TestMutationsNamedByUser: what a named user does through the API (its
// context carries the user, api.WithUser, as the API's handlers set it) is
// recorded with the run: the start as the run's operator and an event, the
// abort as an event and in the reason.
func TestMutationsNamedByUser(t *testing.T) {
	d, fb, w := newFakeDaemon(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	d.Start(context.Background())
	defer d.Stop("test over")
	fb.mu.Lock()
	fb.gate = make(chan struct{}) // holds the first run in its open
	fb.mu.Unlock()
	defer close(fb.gate)
	mira := api.WithUser(context.Background(), api.User{Name: "mira", Role: api.RoleOperate})
	tomas := api.WithUser(context.Background(), api.User{Name: "tomas", Role: api.RoleAdmin})
	ends := make(chan record.Run, 2)
	if _, err := d.SubmitNamed(context.Background(), "aldermoor-ring-2", "first.yaml", []byte(quickLoop), "test",
		func(r record.Run, _ error) { ends <- r }); err != nil {
		t.Fatal(err)
	}
	id, err := d.Submit(mira, "aldermoor-ring-2", []byte(quickLoop))
	if err != nil {
		t.Fatal(err)
	}
	if err := d.Abort(tomas, id); err != nil {
		t.Fatal(err)
	}
	r := w.Run(id)
	if r.Operator != "mira" || r.State != record.Aborted || r.Reason != "aborted on request by tomas (before it started)" {
		t.Errorf("stored run: operator %q, %s %q", r.Operator, r.State, r.Reason)
	}
	var texts []string
	for _, e := range w.EventsOf(id) {
		texts = append(texts, e.Text)
	}
	all := strings.Join(texts, "\n")
	for _, want := range []string{"user mira (operate): run started (queued through the API)", "user tomas (admin): abort requested"} {
		if !strings.Contains(all, want) {
			t.Errorf("no event %q in\n%s", want, all)
		}
	}
}
