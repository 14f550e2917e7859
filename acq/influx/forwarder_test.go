package influx

import (
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/memstore"
	"hystd/configs"
)

// fakeServer answers /api/v2/write with scripted statuses, then 204, and
// keeps every body it acknowledged.
type fakeServer struct {
	mu      sync.Mutex
	script  []func(w http.ResponseWriter) // consumed one per request
	bodies  []string                      // acknowledged bodies
	auth    []string
	queries []string
	srv     *httptest.Server
}

func newFake(t *testing.T, script ...func(w http.ResponseWriter)) *fakeServer {
	f := &fakeServer{script: script}
	f.srv = httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Path != "/api/v2/write" {
			http.NotFound(w, r)
			return
		}
		var body io.Reader = r.Body
		if r.Header.Get("Content-Encoding") == "gzip" {
			zr, err := gzip.NewReader(r.Body)
			if err != nil {
				http.Error(w, err.Error(), 400)
				return
			}
			body = zr
		}
		b, _ := io.ReadAll(body)
		f.mu.Lock()
		defer f.mu.Unlock()
		f.auth = append(f.auth, r.Header.Get("Authorization"))
		f.queries = append(f.queries, r.URL.RawQuery)
		if len(f.script) > 0 {
			s := f.script[0]
			f.script = f.script[1:]
			s(w)
			return
		}
		f.bodies = append(f.bodies, string(b))
		w.WriteHeader(http.StatusNoContent)
	}))
	t.Cleanup(f.srv.Close)
	return f
}

func status(code int, hdr map[string]string, body string) func(w http.ResponseWriter) {
	return func(w http.ResponseWriter) {
		for k, v := range hdr {
			w.Header().Set(k, v)
		}
		w.WriteHeader(code)
		io.WriteString(w, body)
	}
}

func (f *fakeServer) lines() []string {
	f.mu.Lock()
	defer f.mu.Unlock()
	var out []string
	for _, b := range f.bodies {
		for _, l := range strings.Split(strings.TrimSpace(b), "\n") {
			if l != "" {
				out = append(out, l)
			}
		}
	}
	return out
}

// recSleep records the waits and returns at once.
type recSleep struct {
	mu sync.Mutex
	d  []time.Duration
}

func (s *recSleep) sleep(ctx context.Context, d time.Duration) error {
	s.mu.Lock()
	s.d = append(s.d, d)
	s.mu.Unlock()
	return ctx.Err()
}

func openStore(t *testing.T) *store.Store {
	t.Helper()
	s, err := store.Open(context.Background(), filepath.Join(t.TempDir(), "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func seed(t *testing.T, s *store.Store, loops ...record.Loop) {
	t.Helper()
	ctx := context.Background()
	if err := s.CreateRun(ctx, smallRun()); err != nil {
		t.Fatal(err)
	}
	for _, l := range loops {
		if err := s.AddLoop(ctx, l); err != nil {
			t.Fatal(err)
		}
	}
}

func loopN(n int) record.Loop { l := smallLoop(); l.N = n; return l }

func testConfig(url string) Config {
	return Config{URL: url, Org: "lab", Bucket: "hystd", BatchSize: 2, TokenEnv: "HYSTD_TEST_NO_TOKEN"}
}

func TestDeliverSameBytesAsExport(t *testing.T) {
	for _, gz := range []bool{false, true} {
		fs := newFake(t)
		st := openStore(t)
		seed(t, st, loopN(1))
		cfg := testConfig(fs.srv.URL)
		cfg.Gzip = gz
		cfg.BatchSize = 100
		n, err := DeliverAll(context.Background(), st, cfg)
		if err != nil || n != 5 {
			t.Fatalf("gzip=%v: DeliverAll %d %v", gz, n, err)
		}
		var want bytes.Buffer
		WriteLineProtocol(&want, smallRun(), loopN(1))
		if got := strings.Join(fs.lines(), "\n"); got != strings.TrimSpace(want.String()) {
			t.Fatalf("gzip=%v: server got\n%s\nwant\n%s", gz, got, want.String())
		}
		if !strings.Contains(fs.queries[0], "precision=ns") || !strings.Contains(fs.queries[0], "bucket=hystd") {
			t.Errorf("write query %q", fs.queries[0])
		}
		if b, _ := st.Backlog(context.Background()); b.Pending != 0 {
			t.Fatalf("backlog after delivery %+v", b)
		}
	}
}

func TestRetryBackoff(t *testing.T) {
	fs := newFake(t,
		status(503, nil, ""),
		status(429, map[string]string{"Retry-After": "7"}, ""),
		func(w http.ResponseWriter) { // connection dropped mid-request
			hj, _ := w.(http.Hijacker)
			c, _, _ := hj.Hijack()
			c.Close()
		},
		status(500, map[string]string{"Content-Type": "application/json"}, `{"code":"internal error","message":"disk full"}`),
	)
	st := openStore(t)
	seed(t, st, loopN(1))
	sl := &recSleep{}
	f, err := New(testConfig(fs.srv.URL), st, Options{Sleep: sl.sleep, Log: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	n, err := f.Drain(context.Background())
	if err != nil || n != 5 {
		t.Fatalf("Drain: %d %v", n, err)
	}
	// Doubling from min_backoff 1 s; a Retry-After of 7 s wins over 2 s.
	want := []time.Duration{time.Second, 7 * time.Second, 4 * time.Second, 8 * time.Second}
	if len(sl.d) != len(want) {
		t.Fatalf("waits %v, want %v", sl.d, want)
	}
	for i := range want {
		if sl.d[i] != want[i] {
			t.Fatalf("waits %v, want %v", sl.d, want)
		}
	}
	if got := len(fs.lines()); got != 5 {
		t.Fatalf("server holds %d lines, want 5 (no batch twice)", got)
	}
}

func TestQuarantineKeepsServerMessage(t *testing.T) {
	msg := `unable to parse 'hyst_sample,run=run-7 H=': missing field value`
	fs := newFake(t, status(400, map[string]string{"Content-Type": "application/json"}, `{"code":"invalid","message":"`+strings.ReplaceAll(msg, `'`, `'`)+`"}`))
	st := openStore(t)
	seed(t, st, loopN(1), loopN(2))
	sl := &recSleep{}
	f, err := New(testConfig(fs.srv.URL), st, Options{Sleep: sl.sleep, Log: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := f.Drain(context.Background()); err != nil {
		t.Fatal(err)
	}
	q, err := st.Quarantined(context.Background(), 0)
	if err != nil || len(q) != 1 {
		t.Fatalf("quarantined %v %v", q, err)
	}
	if q[0].Loop != 1 || q[0].LastError != "HTTP 400: "+msg {
		t.Fatalf("quarantined entry %+v", q[0])
	}
	b, _ := st.Backlog(context.Background())
	if b.Pending != 0 || b.Quarantined != 1 {
		t.Fatalf("backlog %+v", b)
	}
	if len(sl.d) != 0 {
		t.Fatalf("a 400 was retried: waits %v", sl.d)
	}
	// Loop 2 went through whole: 5 points, none of loop 1's first batch.
	if got := len(fs.lines()); got != 5 {
		t.Fatalf("server holds %d lines, want 5", got)
	}
	// 422 quarantines too.
	fs2 := newFake(t, status(422, nil, "beyond retention"))
	st2 := openStore(t)
	seed(t, st2, loopN(1))
	if _, err := DeliverAll(context.Background(), st2, testConfig(fs2.srv.URL)); err != nil {
		t.Fatal(err)
	}
	if q, _ := st2.Quarantined(context.Background(), 0); len(q) != 1 || !strings.Contains(q[0].LastError, "HTTP 422: beyond retention") {
		t.Fatalf("422: %+v", q)
	}
}

// TestResumeAfterPartialDelivery: a loop of 5 points in batches of 2; the
// second batch fails and the process "stops". A new forwarder resumes at
// point 3 and the server holds every point once.
func TestResumeAfterPartialDelivery(t *testing.T) {
	fs := newFake(t)
	st := openStore(t)
	seed(t, st, loopN(1))
	fs.mu.Lock()
	fs.script = nil
	fs.mu.Unlock()
	// First forwarder: stop after the first acknowledged batch.
	ctx, cancel := context.WithCancel(context.Background())
	f, err := New(testConfig(fs.srv.URL), st, Options{AfterBatch: func(store.OutboxEntry, int, int) { cancel() },
		Log: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := f.Drain(ctx); err == nil {
		t.Fatal("Drain ended without error after cancel")
	}
	f.Close()
	p, _ := st.Pending(context.Background(), 0)
	if len(p) != 1 || p[0].Done != 2 {
		t.Fatalf("after one batch: %+v", p)
	}
	if _, err := DeliverAll(context.Background(), st, testConfig(fs.srv.URL)); err != nil {
		t.Fatal(err)
	}
	var want bytes.Buffer
	WriteLineProtocol(&want, smallRun(), loopN(1))
	if got := strings.Join(fs.lines(), "\n"); got != strings.TrimSpace(want.String()) {
		t.Fatalf("server got\n%s\nwant each point once:\n%s", got, want.String())
	}
}

func TestDeliverAllGivesUp(t *testing.T) {
	fs := newFake(t)
	fs.srv.Close() // nothing listens
	st := openStore(t)
	seed(t, st, loopN(1))
	ctx, cancel := context.WithTimeout(context.Background(), 50*time.Millisecond)
	defer cancel()
	cfg := testConfig(fs.srv.URL)
	cfg.MinBackoff = configs.Duration(10 * time.Millisecond)
	_, err := DeliverAll(ctx, st, cfg)
	if err == nil || !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("DeliverAll to a closed port: %v", err)
	}
	p, _ := st.Pending(context.Background(), 0)
	if len(p) != 1 || p[0].Attempts == 0 || p[0].LastError == "" {
		t.Fatalf("entry after failures: %+v", p)
	}
}

// TestTokenNeverLogged: the token reaches the server's Authorization header
// and appears in no log line or error.
func TestTokenNeverLogged(t *testing.T) {
	const secret = "s3cret-token-value"
	dir := t.TempDir()
	tf := filepath.Join(dir, "token")
	if err := os.WriteFile(tf, []byte(secret+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	fs := newFake(t, status(503, nil, ""), status(400, nil, "bad line"))
	st := openStore(t)
	seed(t, st, loopN(1))
	var logs bytes.Buffer
	cfg := testConfig(fs.srv.URL)
	cfg.TokenFile = tf
	f, err := New(cfg, st, Options{Sleep: (&recSleep{}).sleep, Log: slog.New(slog.NewTextHandler(&logs, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := f.Drain(context.Background()); err != nil {
		t.Fatal(err)
	}
	if fs.auth[0] != "Token "+secret {
		t.Fatalf("Authorization header %q", fs.auth[0])
	}
	q, _ := st.Quarantined(context.Background(), 0)
	if strings.Contains(logs.String(), secret) || strings.Contains(q[0].LastError, secret) {
		t.Fatal("token leaked into logs or the outbox")
	}
	if logs.Len() == 0 {
		t.Fatal("no log line at all: the check above proves nothing")
	}
	// From the environment.
	t.Setenv("HYSTD_TEST_TOKEN", "env-token")
	cfg = testConfig(fs.srv.URL)
	cfg.TokenEnv = "HYSTD_TEST_TOKEN"
	st2 := openStore(t)
	seed(t, st2, loopN(1))
	if _, err := DeliverAll(context.Background(), st2, cfg); err != nil {
		t.Fatal(err)
	}
	if a := fs.auth[len(fs.auth)-1]; a != "Token env-token" {
		t.Fatalf("env token: Authorization %q", a)
	}
	// An empty token file is an error that names the file, not a silent anonymous write.
	empty := filepath.Join(dir, "empty")
	os.WriteFile(empty, nil, 0o600)
	cfg.TokenFile = empty
	if _, err := New(cfg, st2, Options{}); err == nil || !strings.Contains(err.Error(), empty) {
		t.Fatalf("empty token file: %v", err)
	}
}

func TestBacklogMetrics(t *testing.T) {
	st, err := store.OpenWith(context.Background(), filepath.Join(t.TempDir(), "hystd.db"),
		store.Options{Now: func() time.Time { return tStart }})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	seed(t, st, loopN(1), loopN(2))
	reg := prometheus.NewRegistry()
	f, err := New(testConfig("http://127.0.0.1:1"), st, Options{Now: func() time.Time { return tStart.Add(90 * time.Second) }})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	reg.MustRegister(f.Collectors()...)
	mfs, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	got := map[string]float64{}
	for _, mf := range mfs {
		for _, m := range mf.GetMetric() {
			if g := m.GetGauge(); g != nil {
				got[mf.GetName()] = g.GetValue()
			}
		}
	}
	if got["hystd_outbox_pending_loops"] != 2 || got["hystd_outbox_oldest_pending_age_seconds"] != 90 ||
		got["hystd_outbox_quarantined_loops"] != 0 || got["hystd_outbox_read_ok"] != 1 {
		t.Fatalf("metrics %v", got)
	}
}

// TestForwarderOnMemstore: the forwarder needs only the store.Outbox
// contract; the in-memory store that passes the same suite works too.
func TestForwarderOnMemstore(t *testing.T) {
	fs := newFake(t, status(502, nil, "bad gateway"))
	ms := memstore.New(nil)
	ctx := context.Background()
	if err := ms.CreateRun(ctx, smallRun()); err != nil {
		t.Fatal(err)
	}
	for n := 1; n <= 3; n++ {
		if err := ms.AddLoop(ctx, loopN(n)); err != nil {
			t.Fatal(err)
		}
	}
	f, err := New(testConfig(fs.srv.URL), ms, Options{Sleep: (&recSleep{}).sleep, Log: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	n, err := f.Drain(ctx)
	if err != nil || n != 15 {
		t.Fatalf("Drain: %d %v", n, err)
	}
	if got := len(fs.lines()); got != 15 {
		t.Fatalf("server holds %d lines, want 15", got)
	}
	if b, _ := ms.Backlog(ctx); b.Pending != 0 {
		t.Fatalf("backlog %+v", b)
	}
}

// TestTooLargeHalvesBatch: a server that takes at most 2 lines per request
// answers 413 to bigger ones; the forwarder halves the batch and delivers
// everything once, without backing off.
func TestTooLargeHalvesBatch(t *testing.T) {
	var mu sync.Mutex
	var got []string
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		b, _ := io.ReadAll(r.Body)
		lines := strings.Split(strings.TrimSpace(string(b)), "\n")
		if len(lines) > 2 {
			http.Error(w, "request body too large", http.StatusRequestEntityTooLarge)
			return
		}
		mu.Lock()
		got = append(got, lines...)
		mu.Unlock()
		w.WriteHeader(http.StatusNoContent)
	}))
	defer srv.Close()
	st := openStore(t)
	seed(t, st, loopN(1))
	cfg := testConfig(srv.URL)
	cfg.BatchSize = 8
	sl := &recSleep{}
	f, err := New(cfg, st, Options{Sleep: sl.sleep, Log: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if n, err := f.Drain(context.Background()); err != nil || n != 5 {
		t.Fatalf("Drain: %d %v", n, err)
	}
	if len(got) != 5 || len(sl.d) != 0 {
		t.Fatalf("server got %d lines, waits %v", len(got), sl.d)
	}
}

// TestRunWakesOnKick: an idle Run waits its poll interval (the injected
// sleep never returns on its own) and a Kick makes it send a new loop at once.
func TestRunWakesOnKick(t *testing.T) {
	got := make(chan string, 16)
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		b, _ := io.ReadAll(r.Body)
		got <- string(b)
		w.WriteHeader(http.StatusNoContent)
	}))
	defer srv.Close()
	ms := memstore.New(nil)
	ctx := context.Background()
	if err := ms.CreateRun(ctx, smallRun()); err != nil {
		t.Fatal(err)
	}
	waits := make(chan time.Duration, 16)
	sleep := func(ctx context.Context, d time.Duration) error {
		waits <- d
		<-ctx.Done() // only a Kick or the end of Run ends the wait
		return ctx.Err()
	}
	cfg := testConfig(srv.URL)
	cfg.BatchSize = 100
	f, err := New(cfg, ms, Options{Sleep: sleep, Log: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rctx, cancel := context.WithCancel(ctx)
	done := make(chan error, 1)
	go func() { done <- f.Run(rctx) }()
	if d := <-waits; d != DefaultPollInterval {
		t.Fatalf("idle wait %v, want the poll interval %v", d, DefaultPollInterval)
	}
	if err := ms.AddLoop(ctx, loopN(1)); err != nil {
		t.Fatal(err)
	}
	f.Kick()
	body := <-got
	if n := strings.Count(strings.TrimSpace(body), "\n") + 1; n != 5 {
		t.Fatalf("sent %d lines, want 5", n)
	}
	<-waits // idle again
	cancel()
	if err := <-done; !errors.Is(err, context.Canceled) {
		t.Fatalf("Run returned %v", err)
	}
	if b, _ := ms.Backlog(ctx); b.Pending != 0 {
		t.Fatalf("backlog %+v", b)
	}
}
