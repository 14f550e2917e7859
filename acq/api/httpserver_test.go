package api

import (
	"bufio"
	"context"
	"net"
	"net/http"
	"testing"
	"time"
)

// TestNewHTTPServer: the timeouts are the ones asked for, and Shutdown ends
// a handler that streams until its request is cancelled, so it does not
// wait for its deadline.
func TestNewHTTPServer(t *testing.T) {
	started := make(chan struct{})
	h := http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		_ = http.NewResponseController(w).SetWriteDeadline(time.Time{})
		w.WriteHeader(http.StatusOK)
		_, _ = w.Write([]byte("open\n"))
		_ = http.NewResponseController(w).Flush()
		close(started)
		<-r.Context().Done()
	})
	srv := NewHTTPServer(context.Background(), h, DefaultHTTPTimeouts)
	for _, c := range []struct {
		name      string
		got, want time.Duration
	}{
		{"ReadHeaderTimeout", srv.ReadHeaderTimeout, 5 * time.Second},
		{"ReadTimeout", srv.ReadTimeout, 30 * time.Second},
		{"WriteTimeout", srv.WriteTimeout, 60 * time.Second},
		{"IdleTimeout", srv.IdleTimeout, 120 * time.Second},
	} {
		if c.got != c.want {
			t.Errorf("%s = %v, want %v", c.name, c.got, c.want)
		}
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	served := make(chan error, 1)
	go func() { served <- srv.Serve(ln) }()
	resp, err := http.Get("http://" + ln.Addr().String() + "/")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if line, err := bufio.NewReader(resp.Body).ReadString('\n'); err != nil || line != "open\n" {
		t.Fatalf("stream: %q %v", line, err)
	}
	<-started
	sctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := srv.Shutdown(sctx); err != nil {
		t.Errorf("Shutdown with a stream open: %v", err)
	}
	if err := <-served; err != http.ErrServerClosed {
		t.Errorf("Serve: %v", err)
	}
}
