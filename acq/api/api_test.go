package api

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"hystd/acq/live"
	"hystd/acq/record"
	"hystd/acq/store/memstore"
)

const testToken = "s3cret-bench-token"

var t0 = time.Date(2026, 11, 30, 7, 30, 0, 0, time.UTC)

type env struct {
	srv    *httptest.Server
	store  *testStore
	runner *fakeRunner
	hub    *live.Hub
}

// newEnv serves three finished runs (RUN-A, RUN-B of specimen R-17,
// RUN-C of M-3), one loop each, through o.
func newEnv(t *testing.T, o Options) *env {
	t.Helper()
	return newEnvEdit(t, o, nil)
}

// newEnvEdit is newEnv with edit (if not nil) applied to each of the
// three loops before it is stored.
func newEnvEdit(t *testing.T, o Options, edit func(*record.Loop)) *env {
	t.Helper()
	st := newTestStore()
	for i, spec := range []struct{ id, specimen, material string }{
		{"RUN-A", "R-17", "FeSi3"}, {"RUN-B", "R-17", "FeSi3"}, {"RUN-C", "M-3", "NdFeB-demo"},
	} {
		l := tanhLoop(spec.id, 200, 6000, 400+float64(i)*10, 900, 1.6)
		if edit != nil {
			edit(&l)
		}
		put(t, st, record.Run{ID: spec.id, Recipe: "ring-soft-loop", Fixture: "ring-bench", Specimen: spec.specimen,
			Material: spec.material, State: record.Finished, Started: t0.Add(time.Duration(i) * 24 * time.Hour),
			Ended: t0.Add(time.Duration(i)*24*time.Hour + time.Minute)}, l)
	}
	addEvents(t, st, record.Event{RunID: "RUN-A", At: t0, Level: "info", Text: "step 1 demagnetize"})
	hub := live.NewHub(64)
	clock := t0
	rn := &fakeRunner{store: st, hub: hub, now: func() time.Time { clock = clock.Add(time.Second); return clock }}
	o.Reader = st
	if o.Runner == nil {
		o.Runner = rn
	}
	o.Live = hub
	h, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	t.Cleanup(srv.Close)
	return &env{srv: srv, store: st, runner: rn, hub: hub}
}

func (e *env) do(t *testing.T, method, path, token, ctype string, body io.Reader) (int, map[string]any, http.Header) {
	t.Helper()
	req, err := http.NewRequest(method, e.srv.URL+path, body)
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var m map[string]any
	b, _ := io.ReadAll(resp.Body)
	if strings.HasPrefix(resp.Header.Get("Content-Type"), "application/json") {
		if err := json.Unmarshal(b, &m); err != nil {
			t.Fatalf("%s %s: body is not JSON: %v: %s", method, path, err, b)
		}
	}
	return resp.StatusCode, m, resp.Header
}

const goodRecipe = `kind: recipe
name: api-test-loop
control: current
steps:
  - record_loop: {amplitude: 1 kA/m, rate: 400 A/m/s, points: 200, hold: 2s}
`

func TestMutationsNeedToken(t *testing.T) {
	e := newEnv(t, Options{Token: testToken})
	tests := []struct {
		name, method, path, token string
		body                      string
		want                      int
	}{
		{"submit without token", "POST", "/api/v1/runs", "", goodRecipe, 401},
		{"submit with wrong token", "POST", "/api/v1/runs", "guess", goodRecipe, 401},
		{"submit with a longer wrong token", "POST", "/api/v1/runs", testToken + "x", goodRecipe, 401},
		{"abort without token", "POST", "/api/v1/runs/RUN-A/abort", "", "", 401},
		{"abort with wrong token", "POST", "/api/v1/runs/RUN-A/abort", "nope", "", 401},
	}
	for _, tc := range tests {
		code, m, h := e.do(t, tc.method, tc.path, tc.token, "application/yaml", strings.NewReader(tc.body))
		if code != tc.want {
			t.Errorf("%s: %d %v, want %d", tc.name, code, m, tc.want)
		}
		if !strings.HasPrefix(h.Get("WWW-Authenticate"), "Bearer") {
			t.Errorf("%s: WWW-Authenticate %q", tc.name, h.Get("WWW-Authenticate"))
		}
	}
	if n := e.runner.callCount(); n != 0 {
		t.Errorf("runner called %d times by refused requests", n)
	}
	code, m, h := e.do(t, "POST", "/api/v1/runs", testToken, "application/yaml", strings.NewReader(goodRecipe))
	if code != 202 || m["run_id"] != "RUN-001" || h.Get("Location") != "/api/v1/runs/RUN-001" {
		t.Fatalf("submit with token: %d %v %v", code, m, h)
	}
	code, m, _ = e.do(t, "POST", "/api/v1/runs/RUN-001/abort", testToken, "", nil)
	if code != 202 {
		t.Fatalf("abort with token: %d %v", code, m)
	}
	if r, _ := e.store.Run(context.Background(), "RUN-001"); r.State != record.Aborted {
		t.Errorf("run state %s after abort", r.State)
	}
	code, m, _ = e.do(t, "POST", "/api/v1/runs/RUN-001/abort", testToken, "", nil)
	if code != 409 {
		t.Errorf("second abort: %d %v, want 409", code, m)
	}
}

func TestNoTokenConfiguredRefusesMutations(t *testing.T) {
	e := newEnv(t, Options{})
	for _, tok := range []string{"", "anything"} {
		code, m, _ := e.do(t, "POST", "/api/v1/runs", tok, "application/yaml", strings.NewReader(goodRecipe))
		if code != 403 || !strings.Contains(m["error"].(string), "no API token") {
			t.Errorf("token %q: %d %v, want 403", tok, code, m)
		}
	}
	if code, _, _ := e.do(t, "GET", "/api/v1/runs", "", "", nil); code != 200 {
		t.Errorf("reads refused without a token: %d", code)
	}
}

func TestProtectReads(t *testing.T) {
	e := newEnv(t, Options{Token: testToken, ProtectReads: true})
	for _, p := range []string{"/api/v1/runs", "/api/v1/runs/RUN-A", "/metrics", "/api/v1/events"} {
		if code, _, _ := e.do(t, "GET", p, "", "", nil); code != 401 {
			t.Errorf("GET %s without token: %d, want 401", p, code)
		}
	}
	if code, _, _ := e.do(t, "GET", "/api/v1/runs", testToken, "", nil); code != 200 {
		t.Errorf("GET with token: %d", code)
	}
	if code, _, _ := e.do(t, "GET", "/healthz", "", "", nil); code != 200 {
		t.Errorf("healthz: %d", code)
	}
}

func TestTokenSources(t *testing.T) {
	dir := t.TempDir()
	file := filepath.Join(dir, "token")
	if err := os.WriteFile(file, []byte("  from-file  \nsecond line ignored\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	empty := filepath.Join(dir, "empty")
	if err := os.WriteFile(empty, []byte("\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	t.Setenv("HYSTD_TEST_TOKEN", "from-env")
	tests := []struct {
		name    string
		o       Options
		good    string
		wantErr string
	}{
		{"file", Options{TokenFile: file}, "from-file", ""},
		{"env", Options{TokenEnv: "HYSTD_TEST_TOKEN"}, "from-env", ""},
		{"literal wins", Options{Token: "lit", TokenFile: file}, "lit", ""},
		{"missing file", Options{TokenFile: filepath.Join(dir, "nope")}, "", "token file"},
		{"empty file", Options{TokenFile: empty}, "", "first line is empty"},
	}
	for _, tc := range tests {
		tc.o.Reader = memstore.New(nil)
		tc.o.Runner = &fakeRunner{}
		h, err := New(tc.o)
		if tc.wantErr != "" {
			if err == nil || !strings.Contains(err.Error(), tc.wantErr) {
				t.Errorf("%s: err %v, want %q", tc.name, err, tc.wantErr)
			}
			continue
		}
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		req := httptest.NewRequest("POST", "/api/v1/runs/X/abort", nil)
		req.Header.Set("Authorization", "Bearer "+tc.good)
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		if rec.Code == 401 || rec.Code == 403 {
			t.Errorf("%s: good token refused: %d %s", tc.name, rec.Code, rec.Body)
		}
	}
}

func TestOversizedBody(t *testing.T) {
	e := newEnv(t, Options{Token: testToken, MaxBody: 4096})
	big := goodRecipe + "# " + strings.Repeat("x", 5000) + "\n"
	code, m, _ := e.do(t, "POST", "/api/v1/runs", testToken, "application/yaml", strings.NewReader(big))
	if code != 413 || !strings.Contains(m["error"].(string), "4096 bytes") {
		t.Errorf("oversized: %d %v, want 413 naming the limit", code, m)
	}
	if n := e.runner.callCount(); n != 0 {
		t.Errorf("runner called for an oversized body")
	}
	runs, _ := e.store.Runs(context.Background(), record.RunFilter{})
	if len(runs) != 3 {
		t.Errorf("%d runs after refused submit, want 3", len(runs))
	}
}

func TestUnknownRun(t *testing.T) {
	e := newEnv(t, Options{Token: testToken})
	tests := []struct{ method, path, token string }{
		{"GET", "/api/v1/runs/NO-SUCH", ""},
		{"GET", "/api/v1/runs/NO-SUCH/loops/1", ""},
		{"GET", "/api/v1/runs/RUN-A/loops/9", ""},
		{"POST", "/api/v1/runs/NO-SUCH/abort", testToken},
		{"GET", "/api/v1/nothing-here", ""},
	}
	for _, tc := range tests {
		code, m, _ := e.do(t, tc.method, tc.path, tc.token, "", nil)
		if code != 404 || m["error"] == "" {
			t.Errorf("%s %s: %d %v, want 404 with an error", tc.method, tc.path, code, m)
		}
	}
}

func TestMalformedRecipe(t *testing.T) {
	// The fake runner validates with the real recipe parser (acq/recipe),
	// so the messages are the ones a user sees.
	e := newEnv(t, Options{Token: testToken})
	tests := []struct {
		name, body, ctype string
		want              int
		mention           []string
	}{
		{"unknown key", strings.Replace(goodRecipe, "control:", "controll:", 1), "application/yaml", 400, []string{"controll", ":3:"}},
		{"not YAML", "kind: recipe\nsteps: [ {\n", "application/yaml", 400, []string{"submitted recipe"}},
		{"wrong kind", strings.Replace(goodRecipe, "kind: recipe", "kind: fixture", 1), "text/yaml", 400, []string{"kind"}},
		{"empty body", "  \n", "application/yaml", 400, []string{"empty body"}},
		{"bad amplitude", strings.Replace(goodRecipe, "1 kA/m", "1 parsec", 1), "application/yaml", 400, []string{"parsec"}},
		{"json sent", `{"kind":"recipe"}`, "application/json", 415, []string{"application/yaml"}},
		{"no content type", goodRecipe, "", 415, []string{"no Content-Type", "application/yaml"}},
		{"form (curl's default)", goodRecipe, "application/x-www-form-urlencoded", 415, []string{"application/yaml"}},
		{"plain text", goodRecipe, "text/plain", 415, []string{"application/yaml"}},
		{"octet stream", goodRecipe, "application/octet-stream", 415, []string{"application/yaml"}},
		{"bad media type", goodRecipe, "yaml;;", 415, []string{"application/yaml"}},
	}
	for _, tc := range tests {
		code, m, _ := e.do(t, "POST", "/api/v1/runs", testToken, tc.ctype, strings.NewReader(tc.body))
		msg, _ := m["error"].(string)
		if code != tc.want {
			t.Errorf("%s: %d %q, want %d", tc.name, code, msg, tc.want)
			continue
		}
		for _, w := range tc.mention {
			if !strings.Contains(msg, w) {
				t.Errorf("%s: error %q does not mention %q", tc.name, msg, w)
			}
		}
	}
	if code, m, _ := e.do(t, "POST", "/api/v1/runs?fixture=yoke-9", testToken, "application/yaml", strings.NewReader(goodRecipe)); code != 400 {
		t.Errorf("unknown fixture: %d %v", code, m)
	}
	runs, _ := e.store.Runs(context.Background(), record.RunFilter{})
	if len(runs) != 3 {
		t.Errorf("%d runs after refused submits, want 3", len(runs))
	}
}

func TestListRunsFilters(t *testing.T) {
	e := newEnv(t, Options{})
	tests := []struct {
		query   string
		want    int
		wantIDs []string
		bad     string
	}{
		{"", 200, []string{"RUN-C", "RUN-B", "RUN-A"}, ""},
		{"?specimen=R-17", 200, []string{"RUN-B", "RUN-A"}, ""},
		{"?material=NdFeB-demo", 200, []string{"RUN-C"}, ""},
		{"?since=2026-12-01", 200, []string{"RUN-C", "RUN-B"}, ""},
		{"?until=2026-11-30", 200, []string{"RUN-A"}, ""},
		{"?since=2026-12-01T00:00:00Z&limit=1", 200, []string{"RUN-C"}, ""},
		{"?state=finished&fixture=ring-bench", 200, []string{"RUN-C", "RUN-B", "RUN-A"}, ""},
		{"?state=done", 400, nil, "state"},
		{"?since=yesterday", 400, nil, "since"},
		// Unix nanoseconds end at 2262-04-11T23:47:16Z (int64, Go's time.UnixNano).
		{"?since=2300-01-01", 400, nil, "since: \"2300-01-01\": beyond the times a run can have (1677-09-21 to 2262-04-11)"},
		{"?until=9999-12-31", 400, nil, "until"},
		{"?until=2262-04-11", 400, nil, "until"}, // the end of that day is past the last nanosecond
		{"?until=2262-04-10", 200, []string{"RUN-C", "RUN-B", "RUN-A"}, ""},
		{"?since=1500-01-01T00:00:00Z", 400, nil, "since"},
		{"?limit=-4", 400, nil, "limit"},
		{"?specimn=R-17", 400, nil, "specimn"},
	}
	for _, tc := range tests {
		code, m, _ := e.do(t, "GET", "/api/v1/runs"+tc.query, "", "", nil)
		if code != tc.want {
			t.Errorf("%s: %d %v", tc.query, code, m)
			continue
		}
		if tc.bad != "" {
			if msg, _ := m["error"].(string); !strings.Contains(msg, tc.bad) {
				t.Errorf("%s: error %q does not name %q", tc.query, msg, tc.bad)
			}
			continue
		}
		runs := m["runs"].([]any)
		var ids []string
		for _, r := range runs {
			ids = append(ids, r.(map[string]any)["id"].(string))
		}
		if strings.Join(ids, ",") != strings.Join(tc.wantIDs, ",") {
			t.Errorf("%s: runs %v, want %v", tc.query, ids, tc.wantIDs)
		}
	}
}

func TestRunAndLoopJSON(t *testing.T) {
	e := newEnv(t, Options{})
	code, m, _ := e.do(t, "GET", "/api/v1/runs/RUN-A", "", "", nil)
	if code != 200 {
		t.Fatal(code, m)
	}
	loops := m["loops"].([]any)
	if len(loops) != 1 || loops[0].(map[string]any)["points"] != nil {
		t.Errorf("run summary loops %v: want one summary without points", loops)
	}
	if evs := m["events"].([]any); len(evs) != 1 {
		t.Errorf("events %v", evs)
	}
	code, m, _ = e.do(t, "GET", "/api/v1/runs/RUN-A/loops/1?raw=1", "", "", nil)
	if code != 200 {
		t.Fatal(code, m)
	}
	l := m["loop"].(map[string]any)
	pts := l["points"].(map[string]any)
	want := tanhLoop("RUN-A", 200, 6000, 400, 900, 1.6)
	hs := pts["h_a_m"].([]any)
	bs := pts["b_t"].([]any)
	if len(hs) != len(want.Points) || int(l["n_points"].(float64)) != len(want.Points) {
		t.Fatalf("%d points, want %d", len(hs), len(want.Points))
	}
	for i := range hs {
		if hs[i].(float64) != want.Points[i].H || bs[i].(float64) != want.Points[i].B {
			t.Fatalf("point %d differs: %v,%v vs %+v", i, hs[i], bs[i], want.Points[i])
		}
	}
	// NaN becomes null, both for an absent channel and an unevaluated U.
	raw := l["raw"].(map[string]any)
	if v := raw["b_probe_t"].([]any)[0]; v != nil {
		t.Errorf("NaN channel encoded as %v, want null", v)
	}
	// Each channel's read-time offset comes with every raw sample.
	for _, k := range []string{"dt_i_s", "dt_b_probe_s"} {
		if d, ok := raw[k].([]any); !ok || len(d) != len(raw["t_s"].([]any)) || d[0] != 0.0 {
			t.Errorf("raw %s: %v", k, raw[k])
		}
	}
	figs := l["figures"].([]any)
	if u := figs[2].(map[string]any)["u"]; u != nil {
		t.Errorf("NaN uncertainty encoded as %v", u)
	}
	if code, m, _ := e.do(t, "GET", "/api/v1/runs/RUN-A/loops/x", "", "", nil); code != 400 {
		t.Errorf("loop x: %d %v", code, m)
	}
}

func TestTrend(t *testing.T) {
	e := newEnv(t, Options{})
	code, m, _ := e.do(t, "GET", "/api/v1/trend?specimen=R-17&figure=HcB", "", "", nil)
	if code != 200 {
		t.Fatal(code, m)
	}
	pts := m["points"].([]any)
	if len(pts) != 2 || pts[0].(map[string]any)["value"].(float64) != 400 || pts[1].(map[string]any)["value"].(float64) != 410 {
		t.Errorf("trend %v", pts)
	}
	for _, q := range []string{"?specimen=R-17", "?figure=HcB", "?specimen=R-17&figure=HcB&since=soon"} {
		if code, _, _ := e.do(t, "GET", "/api/v1/trend"+q, "", "", nil); code != 400 {
			t.Errorf("%s: %d, want 400", q, code)
		}
	}
}

func TestEventStream(t *testing.T) {
	e := newEnv(t, Options{})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, "GET", e.srv.URL+"/api/v1/events?run=RUN-9", nil)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if ct := resp.Header.Get("Content-Type"); ct != "text/event-stream" {
		t.Fatalf("Content-Type %q", ct)
	}
	rd := bufio.NewReader(resp.Body)
	next := func() (string, string) {
		var ev, data string
		for {
			line, err := rd.ReadString('\n')
			if err != nil {
				t.Fatalf("stream ended: %v", err)
			}
			line = strings.TrimRight(line, "\n")
			switch {
			case line == "" && ev != "":
				return ev, data
			case strings.HasPrefix(line, "event: "):
				ev = line[7:]
			case strings.HasPrefix(line, "data: "):
				data = line[6:]
			}
		}
	}
	if ev, _ := next(); ev != "hello" {
		t.Fatalf("first event %q", ev)
	}
	for e.hub.Subscribers() == 0 { // the handler subscribes right after hello
		time.Sleep(time.Millisecond)
	}
	e.hub.Publish(live.Event{Kind: live.KindSample, RunID: "OTHER", H: 1})
	e.hub.Publish(live.Event{Kind: live.KindProgress, RunID: "RUN-9", Step: 2, Steps: 5, Fraction: 0.25})
	e.hub.Publish(live.Event{Kind: live.KindSample, RunID: "RUN-9", Loop: 1, H: -512.5, B: 0.75})
	ev, data := next()
	var got live.Event
	if err := json.Unmarshal([]byte(data), &got); err != nil {
		t.Fatal(err)
	}
	if ev != "progress" || got.Step != 2 || got.Fraction != 0.25 {
		t.Errorf("got %s %+v, want progress step 2 (the OTHER run filtered out)", ev, got)
	}
	ev, data = next()
	_ = json.Unmarshal([]byte(data), &got)
	if ev != "sample" || got.H != -512.5 || got.B != 0.75 {
		t.Errorf("got %s %+v", ev, got)
	}
}

func TestPanicBecomes500(t *testing.T) {
	e := newEnv(t, Options{})
	e.store.explode.Store(true)
	code, m, _ := e.do(t, "GET", "/api/v1/runs", "", "", nil)
	if code != 500 || m["error"] != "internal error" {
		t.Errorf("%d %v", code, m)
	}
}

func TestPageAndHeaders(t *testing.T) {
	e := newEnv(t, Options{})
	resp, err := http.Get(e.srv.URL + "/")
	if err != nil {
		t.Fatal(err)
	}
	b, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 || !strings.Contains(string(b), "<!doctype html>") {
		t.Errorf("page: %d %.80s", resp.StatusCode, b)
	}
	if csp := resp.Header.Get("Content-Security-Policy"); !strings.Contains(csp, "default-src 'self'") {
		t.Errorf("CSP %q", csp)
	}
	code, m, _ := e.do(t, "GET", "/healthz", "", "", nil)
	if code != 200 || m["ok"] != true {
		t.Errorf("healthz %d %v", code, m)
	}
	resp, err = http.Get(e.srv.URL + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	b, _ = io.ReadAll(resp.Body)
	resp.Body.Close()
	if !strings.Contains(string(b), "hystd_http_event_streams 0") {
		t.Errorf("metrics lack the event stream gauge")
	}
	if !strings.Contains(string(b), `hystd_http_requests_total{code="200",route="/healthz"} 1`) {
		t.Errorf("metrics lack the healthz request count:\n%s", b)
	}
}

func TestServeShutsDownOnCancel(t *testing.T) {
	h, err := New(Options{Reader: memstore.New(nil)})
	if err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- ServeListener(ctx, ln, h) }()
	// An open event stream must not hold the shutdown up.
	resp, err := http.Get("http://" + ln.Addr().String() + "/api/v1/events")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	cancel()
	if err := <-done; err != nil {
		t.Errorf("ServeListener: %v", err)
	}
	if _, err := http.Get("http://" + ln.Addr().String() + "/healthz"); err == nil {
		t.Error("still serving after shutdown")
	}
	if err := Serve(context.Background(), "127.0.0.1:notaport", h); err == nil || errors.Is(err, context.Canceled) {
		t.Errorf("bad address: %v", err)
	}
}

func TestPlotEndpoint(t *testing.T) {
	e := newEnv(t, Options{})
	put(t, e.store, record.Run{ID: "EMPTY", State: record.Failed}, record.Loop{RunID: "EMPTY", N: 1})
	tests := []struct {
		query string
		code  int
		ctype string
		magic string
	}{
		{"", 200, "image/svg+xml", "<?xml"},
		{"?format=png&y=J&units=cgs&width=640&height=480", 200, "image/png", "\x89PNG"},
		{"?quadrant=2", 200, "image/svg+xml", "<?xml"},
		{"?format=gif", 400, "application/json", `{"error":"format: \"gif\"`},
		{"?y=H", 400, "application/json", `{"error":"y: \"H\": want B or J"`},
		{"?units=imperial", 400, "application/json", `{"error":"units: \"imperial\": want si or cgs"`},
		{"?quadrant=3", 400, "application/json", `{"error":"quadrant: \"3\": want 2 or nothing"`},
		{"?width=50", 400, "application/json", `{"error":"width`},
		{"?format=png&width=4000&height=4000", 400, "application/json", `{"error":"width: \"4000\": want a whole number of pixels from 200 to 2000"`},
		{"?format=png&width=2000&height=2000", 200, "image/png", "\x89PNG"},
		{"?colour=red", 400, "application/json", `{"error":"unknown query parameter \"colour\"`},
	}
	for _, tc := range tests {
		resp, err := http.Get(e.srv.URL + "/api/v1/runs/RUN-A/loops/1/plot" + tc.query)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != tc.code || !strings.HasPrefix(resp.Header.Get("Content-Type"), tc.ctype) || !strings.HasPrefix(string(b), tc.magic) {
			t.Errorf("%s: %d %s %.60q", tc.query, resp.StatusCode, resp.Header.Get("Content-Type"), b)
		}
	}
	if code, m, _ := e.do(t, "GET", "/api/v1/runs/EMPTY/loops/1/plot", "", "", nil); code != 422 || !strings.Contains(m["error"].(string), "no finite points") {
		t.Errorf("empty loop: %d %v", code, m)
	}
	if code, _, _ := e.do(t, "GET", "/api/v1/runs/NOPE/loops/1/plot", "", "", nil); code != 404 {
		t.Errorf("unknown run: %d", code)
	}
}

func TestReviewOnlyServer(t *testing.T) {
	// Without a Runner (hystd demo --serve) the token is still checked
	// first, then mutations answer 503.
	h, err := New(Options{Reader: memstore.New(nil), Token: testToken})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	defer srv.Close()
	e := &env{srv: srv}
	if code, _, _ := e.do(t, "POST", "/api/v1/runs", "", "application/yaml", strings.NewReader(goodRecipe)); code != 401 {
		t.Errorf("no token: %d, want 401", code)
	}
	code, m, _ := e.do(t, "POST", "/api/v1/runs", testToken, "application/yaml", strings.NewReader(goodRecipe))
	if code != 503 || !strings.Contains(m["error"].(string), "runs no fixture") {
		t.Errorf("with token: %d %v, want 503", code, m)
	}
}

func BenchmarkLoopJSON100k(b *testing.B) {
	// Encoding a 100 k-point loop for the page (points as columns).
	rd := memstore.New(nil)
	put(b, rd, record.Run{ID: "BIG"}, tanhLoop("BIG", 50000, 6000, 400, 900, 1.6))
	h, err := New(Options{Reader: rd})
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, httptest.NewRequest("GET", "/api/v1/runs/BIG/loops/1", nil))
		if rec.Code != 200 {
			b.Fatal(rec.Code)
		}
		b.SetBytes(int64(rec.Body.Len()))
	}
}

func TestLoopMaxPoints(t *testing.T) {
	e := newEnv(t, Options{})
	tests := []struct {
		q          string
		code       int
		n, stride  int
		wantPoints int
	}{
		{"", 200, 401, 0, 401},
		{"?max_points=1000", 200, 401, 0, 401},
		{"?max_points=101", 200, 401, 4, 101}, // 0, 4, …, 400
		{"?max_points=100", 200, 401, 5, 81},  // 0, 5, …, 400
		{"?max_points=2", 200, 401, 400, 2},   // first and last
		{"?max_points=1", 400, 0, 0, 0},
		{"?max_points=lots", 400, 0, 0, 0},
	}
	for _, tc := range tests {
		code, m, _ := e.do(t, "GET", "/api/v1/runs/RUN-A/loops/1"+tc.q, "", "", nil)
		if code != tc.code {
			t.Errorf("%s: %d %v", tc.q, code, m)
			continue
		}
		if code != 200 {
			continue
		}
		l := m["loop"].(map[string]any)
		hs := l["points"].(map[string]any)["h_a_m"].([]any)
		stride, _ := l["points_stride"].(float64)
		if int(l["n_points"].(float64)) != tc.n || int(stride) != tc.stride && !(tc.stride == 0 && stride == 1) || len(hs) != tc.wantPoints {
			t.Errorf("%s: n_points %v stride %v, %d points; want %d, %d, %d", tc.q, l["n_points"], stride, len(hs), tc.n, tc.stride, tc.wantPoints)
		}
		if last := hs[len(hs)-1].(float64); last != 6000 { // the loop ends at +Hmax
			t.Errorf("%s: last H %v, want 6000", tc.q, last)
		}
	}
}

// fakeTicker is a heartbeat clock the test fires by hand.
type fakeTicker struct{ c chan time.Time }

func (f *fakeTicker) new(time.Duration) (<-chan time.Time, func()) { return f.c, func() {} }

func TestEventStreamHeartbeatAndLimit(t *testing.T) {
	ft := &fakeTicker{c: make(chan time.Time)}
	h, err := New(Options{Reader: memstore.New(nil), Live: live.NewHub(4), MaxStreams: 1})
	if err != nil {
		t.Fatal(err)
	}
	h.(*server).ticker = ft.new
	srv := httptest.NewServer(h)
	defer srv.Close()
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, "GET", srv.URL+"/api/v1/events", nil)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	rd := bufio.NewReader(resp.Body)
	for {
		line, err := rd.ReadString('\n')
		if err != nil {
			t.Fatal(err)
		}
		if strings.HasPrefix(line, "data: ") { // end of hello
			break
		}
	}
	// A second stream over the limit is refused while the first is open.
	resp2, err := http.Get(srv.URL + "/api/v1/events")
	if err != nil {
		t.Fatal(err)
	}
	resp2.Body.Close()
	if resp2.StatusCode != 503 {
		t.Errorf("second stream: %d, want 503", resp2.StatusCode)
	}
	ft.c <- time.Time{}
	for {
		line, err := rd.ReadString('\n')
		if err != nil {
			t.Fatal(err)
		}
		if line == ": keep-alive\n" {
			break
		}
	}
}

func TestThinKeepsLast(t *testing.T) {
	ps := make([]record.Point, 10)
	for i := range ps {
		ps[i].H = float64(i)
	}
	for _, tc := range []struct{ stride, n int }{{3, 4}, {4, 4}, {9, 2}, {1, 10}} {
		got := thin(ps, tc.stride)
		if len(got) != tc.n || got[len(got)-1].H != 9 || got[0].H != 0 {
			t.Errorf("stride %d: %v", tc.stride, got)
		}
	}
}

type listingRunner struct{ *fakeRunner }

func (listingRunner) Status() []FixtureStatus {
	return []FixtureStatus{{Name: "ring-bench", ActiveRun: "RUN-X"}}
}

func TestInfo(t *testing.T) {
	for _, tc := range []struct {
		name     string
		runner   Runner
		fixtures int
	}{{"plain runner", nil, 0}, {"daemon-like runner", listingRunner{&fakeRunner{}}, 1}} {
		e := newEnv(t, Options{Runner: tc.runner, Token: testToken})
		code, m, _ := e.do(t, "GET", "/api/v1/info", "", "", nil)
		if code != 200 {
			t.Fatal(code, m)
		}
		if fx := m["fixtures"].([]any); len(fx) != tc.fixtures {
			t.Errorf("%s: fixtures %v", tc.name, fx)
		}
		// CGS factors from calib/units: 1 Oe = 79.577 4715 A/m (NBS SP 696).
		if oe := m["cgs"].(map[string]any)["oe_per_a_m"].(float64); math.Abs(79.5774715*oe-1) > 1e-9 {
			t.Errorf("oe_per_a_m %v", oe)
		}
		if m["can_submit"] != true {
			t.Errorf("%s: can_submit %v", tc.name, m["can_submit"])
		}
	}
}

func TestPageNeedsNoNetwork(t *testing.T) {
	// Every file of the page is embedded; none refers to another host (the
	// SVG namespace is a name, never fetched).
	re := regexp.MustCompile(`(?i)(https?:)?//[a-z0-9.-]+\.[a-z]{2,}`)
	entries, err := fs.ReadDir(webFS, "web")
	if err != nil || len(entries) < 3 {
		t.Fatalf("embedded page: %v, %d files", err, len(entries))
	}
	for _, e := range entries {
		b, err := fs.ReadFile(webFS, "web/"+e.Name())
		if err != nil {
			t.Fatal(err)
		}
		for _, m := range re.FindAllString(string(b), -1) {
			if m != "http://www.w3.org" {
				t.Errorf("%s refers to %s", e.Name(), m)
			}
		}
	}
}

// fixtureRunner answers Submit as a daemon with two fixtures does when none
// is named, and records the fixture names it was given.
type fixtureRunner struct{ got []string }

func (f *fixtureRunner) Submit(ctx context.Context, fixture string, data []byte) (string, error) {
	f.got = append(f.got, fixture)
	if fixture == "" {
		return "", fmt.Errorf("%w: this daemon drives ring-bench, yoke-9; name one (?fixture=NAME)", ErrFixtureNeeded)
	}
	return "RUN-1", nil
}

func (f *fixtureRunner) Abort(ctx context.Context, id string) error { return nil }

// TestSubmitWithoutFixture: the fixture parameter may be left out and reaches
// the runner as ""; a runner that cannot choose answers 400 with its
// fixtures named.
func TestSubmitWithoutFixture(t *testing.T) {
	fr := &fixtureRunner{}
	e := newEnv(t, Options{Token: testToken, Runner: fr})
	code, m, _ := e.do(t, "POST", "/api/v1/runs", testToken, "application/yaml", strings.NewReader(goodRecipe))
	if msg, _ := m["error"].(string); code != 400 || !strings.Contains(msg, "ring-bench, yoke-9") {
		t.Errorf("no fixture on two: %d %q", code, msg)
	}
	if code, m, _ := e.do(t, "POST", "/api/v1/runs?fixture=yoke-9", testToken, "application/yaml", strings.NewReader(goodRecipe)); code != 202 {
		t.Errorf("named fixture: %d %v", code, m)
	}
	if len(fr.got) != 2 || fr.got[0] != "" || fr.got[1] != "yoke-9" {
		t.Errorf("runner got fixtures %q", fr.got)
	}
}

// TestEventStreamOutlivesServerTimeouts: on the daemon's server (here with
// 150 ms read, write and idle timeouts) an event stream stays open well past
// every one of them and still delivers events, while a client that never
// finishes its request headers is cut off. Socket deadlines run on the wall
// clock, so this test takes about a second of real time.
func TestEventStreamOutlivesServerTimeouts(t *testing.T) {
	const limit = 150 * time.Millisecond
	hub := live.NewHub(4)
	h, err := New(Options{Reader: memstore.New(nil), Live: hub, Heartbeat: limit / 3})
	if err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		done <- serveListener(ctx, ln, h, HTTPTimeouts{ReadHeader: limit, Read: limit, Write: limit, Idle: limit})
	}()
	defer func() {
		cancel()
		if err := <-done; err != nil {
			t.Errorf("serve: %v", err)
		}
	}()
	base := "http://" + ln.Addr().String()
	resp, err := http.Get(base + "/api/v1/events")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	rd := bufio.NewReader(resp.Body)
	opened := time.Now()
	beats := 0
	for time.Since(opened) < 5*limit {
		line, err := rd.ReadString('\n')
		if err != nil {
			t.Fatalf("stream cut after %v (%d keep-alives): %v", time.Since(opened).Round(time.Millisecond), beats, err)
		}
		if line == ": keep-alive\n" {
			beats++
		}
	}
	hub.Publish(live.Event{Kind: live.KindState, RunID: "RUN-LATE", State: record.Running, At: t0})
	for {
		line, err := rd.ReadString('\n')
		if err != nil {
			t.Fatalf("event after %v: %v", time.Since(opened), err)
		}
		if strings.HasPrefix(line, "data: ") && strings.Contains(line, "RUN-LATE") {
			break
		}
	}

	// A request whose headers never end is closed after ReadHeader.
	c, err := net.Dial("tcp", ln.Addr().String())
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	if _, err := io.WriteString(c, "GET /healthz HTTP/1.1\r\nHost: x\r\n"); err != nil {
		t.Fatal(err)
	}
	_ = c.SetReadDeadline(time.Now().Add(20 * limit)) // the test's own guard
	b, err := io.ReadAll(c)
	if ne, ok := err.(net.Error); ok && ne.Timeout() {
		t.Fatalf("a client with unfinished headers was kept open (%q)", b)
	}
}
