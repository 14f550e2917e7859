package api

import (
	"context"
	"io"
	"net"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store/memstore"
)

// TestPlotSemaphore: while MaxRenders drawings are under way, another waits
// for its turn until its request timeout and then gets 503; once a turn is
// free it is drawn.
func TestPlotSemaphore(t *testing.T) {
	rd := memstore.New(nil)
	put(t, rd, record.Run{ID: "RUN-A", State: record.Finished}, tanhLoop("RUN-A", 200, 6000, 400, 900, 1.6))
	h, err := New(Options{Reader: rd, RequestTimeout: 200 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	s := h.(*server)
	for range MaxRenders {
		s.renders <- struct{}{} // drawings under way
	}
	srv := httptest.NewServer(h)
	defer srv.Close()
	get := func() (int, string) {
		resp, err := http.Get(srv.URL + "/api/v1/runs/RUN-A/loops/1/plot?format=png")
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, string(b)
	}
	if code, body := get(); code != http.StatusServiceUnavailable || !strings.Contains(body, "too many plots being drawn at once (2)") {
		t.Errorf("with every turn taken: %d %.100s", code, body)
	}
	<-s.renders
	if code, body := get(); code != http.StatusOK || !strings.HasPrefix(body, "\x89PNG") {
		t.Errorf("with a turn free: %d %.40q", code, body)
	}
}

// TestHostGuard: requests naming another host (a re-pointed name, DNS
// rebinding) are refused with 403; the bound address, localhost on a
// loopback, configured names and, on a wildcard bind, IP literals pass.
func TestHostGuard(t *testing.T) {
	ok := http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { _, _ = io.WriteString(w, "ok") })
	tests := []struct {
		bound string
		names []string
		host  string
		want  int
	}{
		{"127.0.0.1:8740", nil, "127.0.0.1:8740", 200},
		{"127.0.0.1:8740", nil, "localhost:8740", 200},
		{"127.0.0.1:8740", nil, "LOCALHOST", 200},
		{"127.0.0.1:8740", nil, "attacker.example:8740", 403},
		{"127.0.0.1:8740", nil, "127.0.0.2:8740", 403},
		{"127.0.0.1:8740", nil, "", 403},
		{"[::1]:8740", nil, "[::1]:8740", 200},
		{"[::1]:8740", nil, "localhost:8740", 200},
		{"192.0.2.10:8740", []string{"hystd-bay2.lab.example"}, "hystd-bay2.lab.example:8740", 200},
		{"192.0.2.10:8740", []string{"hystd-bay2.lab.example"}, "HYSTD-BAY2.lab.example.", 200},
		{"192.0.2.10:8740", nil, "192.0.2.10:8740", 200},
		{"192.0.2.10:8740", nil, "localhost:8740", 403},
		{"192.0.2.10:8740", []string{"hystd-bay2.lab.example"}, "rebind.attacker.example:8740", 403},
		{"0.0.0.0:8740", nil, "192.0.2.10:8740", 200},
		{"0.0.0.0:8740", nil, "localhost:8740", 200},
		{"0.0.0.0:8740", nil, "rebind.attacker.example:8740", 403},
		{"[::]:8740", nil, "[2001:db8::1]:8740", 200},
	}
	for _, tc := range tests {
		h := HostGuard(ok, tc.bound, tc.names)
		req := httptest.NewRequest("GET", "/api/v1/runs", nil)
		req.Host = tc.host
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		if rec.Code != tc.want {
			t.Errorf("bound %s, names %v, Host %q: %d %s, want %d", tc.bound, tc.names, tc.host, rec.Code, rec.Body, tc.want)
		}
		if tc.want == 403 && !strings.Contains(rec.Body.String(), "is not this daemon's address") {
			t.Errorf("Host %q: refusal %q does not say why", tc.host, rec.Body)
		}
	}
}

// TestServeRefusesForeignHost: the API's own server applies the guard.
func TestServeRefusesForeignHost(t *testing.T) {
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
	defer func() { cancel(); <-done }()
	for host, want := range map[string]int{ln.Addr().String(): 200, "rebind.attacker.example": 403} {
		req, _ := http.NewRequest("GET", "http://"+ln.Addr().String()+"/api/v1/runs", nil)
		req.Host = host
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != want {
			t.Errorf("Host %q: %d, want %d", host, resp.StatusCode, want)
		}
	}
}

// TestImplausibleFlags: a run whose loop reads |J| = 1802 T (an Epstein
// strip length written as 305 m for 0.305 m) carries the flag on the loop
// and on the run, with the geometry warning the engine recorded as an event;
// a plausible loop carries none.
func TestImplausibleFlags(t *testing.T) {
	e := newEnv(t, Options{})
	put(t, e.store, record.Run{ID: "E-305", State: record.Finished, Specimen: "E-305"},
		record.Loop{RunID: "E-305", N: 1, Kind: "loop", Figures: []record.Figure{
			{Name: "Bmax", Value: 1802, Unit: "T"}, {Name: "Hmax", Value: 1000, Unit: "A/m"}, {Name: "mu_a", Value: 1.43e6}},
			Points: []record.Point{{H: 1000, B: 1802, J: 1802}}})
	addEvents(t, e.store, record.Event{RunID: "E-305", At: t0, Level: "warn",
		Text: "geometry of specimen E-305: epstein: strip length 305.000 m is outside 0.28–0.32 m; the 0.94 m path convention assumes that range"})
	code, m, _ := e.do(t, "GET", "/api/v1/runs/E-305", "", "", nil)
	if code != 200 {
		t.Fatalf("%d %v", code, m)
	}
	flags, _ := m["flags"].([]any)
	if len(flags) != 2 || !strings.HasPrefix(flags[0].(string), "geometry of specimen E-305: epstein: strip length 305.000 m") ||
		!strings.HasPrefix(flags[1].(string), "loop 1: implausible — check geometry and turns: |J| reaches 1802 T") {
		t.Errorf("run flags %q", flags)
	}
	code, m, _ = e.do(t, "GET", "/api/v1/runs/E-305/loops/1", "", "", nil)
	lf, _ := m["loop"].(map[string]any)["flags"].([]any)
	if code != 200 || len(lf) != 1 || !strings.Contains(lf[0].(string), "|J| reaches 1802 T") {
		t.Errorf("loop flags %d %q", code, lf)
	}
	code, m, _ = e.do(t, "GET", "/api/v1/runs/RUN-A", "", "", nil)
	if flags, ok := m["flags"].([]any); code != 200 || !ok || len(flags) != 0 {
		t.Errorf("plausible run: %d flags %v", code, m["flags"])
	}
	if lf, ok := m["loops"].([]any)[0].(map[string]any)["flags"].([]any); !ok || len(lf) != 0 {
		t.Errorf("plausible loop flags %v", lf)
	}
}

// BenchmarkPlotPNG: one PNG of the largest size allowed (2000×2000) beside
// its peer, the default size, through the handler. With MaxRenders = 2 the
// memory plots hold at once is at most twice the largest one's.
func BenchmarkPlotPNG(b *testing.B) {
	rd := memstore.New(nil)
	put(b, rd, record.Run{ID: "RUN-A", State: record.Finished}, tanhLoop("RUN-A", 2000, 6000, 400, 900, 1.6))
	h, err := New(Options{Reader: rd})
	if err != nil {
		b.Fatal(err)
	}
	for _, size := range []string{"", "&width=2000&height=2000"} {
		name := "default"
		if size != "" {
			name = "2000x2000"
		}
		b.Run(name, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				rec := httptest.NewRecorder()
				h.ServeHTTP(rec, httptest.NewRequest("GET", "/api/v1/runs/RUN-A/loops/1/plot?format=png"+size, nil))
				if rec.Code != 200 {
					b.Fatalf("%d %s", rec.Code, rec.Body)
				}
			}
		})
	}
}
