package api_test

import (
	"context"
	"net/http/httptest"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"hystd/acq/api"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

// TestBrowserOutbox: over a real store, the page lists a quarantined loop
// with the server's reason above the runs; after a requeue the list is gone.
func TestBrowserOutbox(t *testing.T) {
	if testing.Short() {
		t.Skip("browser test: skipped with -short")
	}
	chromium := findChromium(t)
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(t.TempDir(), "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := st.CreateRun(ctx, storetest.SampleRun("RUN-Q", t0)); err != nil {
		t.Fatal(err)
	}
	if err := st.AddLoop(ctx, storetest.SampleLoop("RUN-Q", 2, 20, t0)); err != nil {
		t.Fatal(err)
	}
	pend, err := st.Pending(ctx, 0)
	if err != nil || len(pend) != 1 {
		t.Fatalf("pending: %d, %v", len(pend), err)
	}
	reason := "HTTP 400: missing -http.pathPrefix in the requested path"
	if err := st.Quarantine(ctx, pend[0].ID, reason); err != nil {
		t.Fatal(err)
	}
	h, err := api.New(api.Options{Reader: st, Outbox: st, Token: "outbox-browser-token-1"})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	// Closed after the browser (cleanups run last first): its event stream
	// keeps a connection open until then.
	t.Cleanup(srv.Close)
	b := newBrowser(t, chromium)
	b.do(chromedp.Navigate(srv.URL + "/"))
	b.wait("the quarantined loop", `!document.querySelector('#outbox-box').hidden && document.querySelectorAll('#outbox-list li').length === 1`, 15*time.Second)
	if got := js[string](b, `document.querySelector('#outbox-list li').textContent`); !strings.Contains(got, "RUN-Q · loop 2") || !strings.Contains(got, reason) {
		t.Errorf("outbox entry reads %q", got)
	}
	if err := st.Requeue(ctx, pend[0].ID); err != nil {
		t.Fatal(err)
	}
	b.do(chromedp.Reload())
	b.wait("the run list", `document.querySelectorAll('#runs-list li').length === 1`, 15*time.Second)
	time.Sleep(300 * time.Millisecond) // the outbox request runs beside the run list's
	if !js[bool](b, `document.querySelector('#outbox-box').hidden`) {
		t.Error("the outbox box still shows after the requeue")
	}
}
