package api

import (
	"context"
	"net"
	"net/http"
	"time"
)

// HTTPTimeouts bound one HTTP connection of the daemon's server. Read
// covers the request with its body (a recipe), Write the handler and the
// answer, Idle a kept-alive connection between requests. A handler that
// streams for longer (the event stream) lifts its own read and write
// deadlines with http.ResponseController.
type HTTPTimeouts struct {
	ReadHeader, Read, Write, Idle time.Duration
}

// DefaultHTTPTimeouts are the timeouts of `hystd serve` and of the API's
// own Serve.
var DefaultHTTPTimeouts = HTTPTimeouts{ReadHeader: 5 * time.Second, Read: 30 * time.Second, Write: 60 * time.Second, Idle: 120 * time.Second}

// NewHTTPServer returns the server `hystd serve` and api.Serve listen with:
// the timeouts t, headers bounded to 32 KiB, and request contexts derived
// from base and cancelled as soon as Shutdown begins, so that open event
// streams end instead of holding Shutdown up to its deadline. The caller
// serves, shuts down and closes it.
func NewHTTPServer(base context.Context, h http.Handler, t HTTPTimeouts) *http.Server {
	ctx, cancel := context.WithCancel(base)
	srv := &http.Server{
		Handler:           h,
		ReadHeaderTimeout: t.ReadHeader,
		ReadTimeout:       t.Read,
		WriteTimeout:      t.Write,
		IdleTimeout:       t.Idle,
		MaxHeaderBytes:    32 << 10,
		BaseContext:       func(net.Listener) context.Context { return ctx },
	}
	srv.RegisterOnShutdown(cancel)
	return srv
}
