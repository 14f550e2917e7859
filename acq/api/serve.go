package api

import (
	"context"
	"errors"
	"net"
	"net/http"
	"time"
)

// Serve listens on addr ("" means DefaultAddr) and serves h until ctx is
// cancelled, then shuts down: new connections are refused, requests in
// flight get up to 5 s to finish, event streams are cut. It returns nil
// after a clean shutdown, or the listen or serve error.
func Serve(ctx context.Context, addr string, h http.Handler) error {
	if addr == "" {
		addr = DefaultAddr
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return err
	}
	return ServeListener(ctx, ln, h)
}

// ServeListener is Serve on an open listener, which it closes. The server
// is NewHTTPServer with DefaultHTTPTimeouts; the event stream
// lifts the read and write timeouts for itself.
func ServeListener(ctx context.Context, ln net.Listener, h http.Handler) error {
	return serveListener(ctx, ln, h, DefaultHTTPTimeouts)
}

func serveListener(ctx context.Context, ln net.Listener, h http.Handler, t HTTPTimeouts) error {
	// Only requests naming this address (or localhost on a loopback) are
	// served: a re-pointed name (DNS rebinding) is refused.
	srv := NewHTTPServer(ctx, HostGuard(h, ln.Addr().String(), nil), t)
	done := make(chan error, 1)
	go func() { done <- srv.Serve(ln) }()
	select {
	case err := <-done:
		return err
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	err := srv.Shutdown(sctx)
	if errors.Is(err, context.DeadlineExceeded) {
		err = srv.Close()
	}
	if serr := <-done; serr != nil && !errors.Is(serr, http.ErrServerClosed) {
		return serr
	}
	return err
}

// ForDaemon is a daemon.APIFactory: the API and review page over the parts
// `hystd serve` hands it (store, daemon, live hub, token, metrics).
func ForDaemon(p DaemonParts) (http.Handler, error) {
	return New(Options{Reader: p.Reader, Runner: p.Runner, Live: p.Live, Gatherer: p.Metrics,
		Token: p.Token, UsersNow: p.Users, Version: p.Version, Logger: p.Log, Outbox: p.Outbox})
}
