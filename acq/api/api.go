// Package api is the HTTP face of hystd: a JSON API over the store, a
// server-sent event stream of what is running, and the review page at "/".
//
// Reading (GET) needs no token unless Options.ProtectReads is set; every
// mutation (POST) needs "Authorization: Bearer TOKEN", compared in constant
// time. With no token configured, mutations are refused with 403: the API is
// never open by default. There is no raw instrument access: the only ways to
// act are submitting a recipe and aborting a run, and the engine behind
// Runner applies the fixture's limits to both.
//
// Bad requests get a JSON error naming the parameter or the problem:
// {"error": "..."} with 400, 401, 403, 404, 409, 413 or 415. A handler
// changes nothing when it answers with an error.
//
// Users (users.go): LoadUsers reads a `kind: users` file; a request's
// token is found by its SHA-256 (every entry compared in constant time),
// the route's minimum role is checked where the route is declared (write),
// and the user reaches the Runner through the request context (UserFrom).
// The daemon records each action with ActionText.
package api

import (
	"context"
	"crypto/sha256"
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"net/http"
	"os"
	"strconv"
	"strings"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"hystd/acq/live"
	"hystd/acq/outbox"
	"hystd/acq/record"
)

// Runner is the write side the API drives. Submit queues a recipe (the
// file's YAML text) on a fixture ("" lets the runner pick its only fixture)
// and returns the new run's id; Abort asks a queued or running run to end
// with a safe ramp-down and returns once the request is accepted, not when
// the current is zero. Both must be safe for concurrent use.
//
// Errors map to status codes: a validation problem (an error that is or
// wraps ErrInvalid, a *configs.Error or configs.Errors, or implements
// BadRequest() bool returning true) → 400 with the error text; record.ErrNotFound
// → 404; ErrConflict (fixture busy, run already ended) → 409; anything else → 500.
type Runner interface {
	Submit(ctx context.Context, fixture string, recipeYAML []byte) (runID string, err error)
	Abort(ctx context.Context, runID string) error
}

// ErrInvalid marks a Runner error as the client's fault (400).
var ErrInvalid = errors.New("invalid request")

// ErrConflict marks a Runner error as a conflict with the current state (409).
var ErrConflict = errors.New("conflict")

// Options configure the handler. Reader is required; Runner and Live may be
// nil (a read-only review server: POSTs answer 503, the event stream stays
// silent).
type Options struct {
	Reader   record.Reader
	Runner   Runner
	Live     live.Source
	Gatherer prometheus.Gatherer // served at /metrics with the API's own metrics; nil: API metrics only
	// Outbox, when set, serves GET /api/v1/outbox (quarantined loops) and
	// POST /api/v1/outbox/requeue (token).
	Outbox outbox.Store

	// Token is the bearer token for mutations. When empty, TokenFile (first
	// line, surrounding spaces trimmed) and then the environment variable
	// TokenEnv are tried. No token at all: mutations are refused.
	Token     string
	TokenFile string
	TokenEnv  string
	// Users are named tokens with roles (LoadUsers); the single token
	// above, when given, acts as SharedTokenUser with role admin.
	Users []Credential
	// UsersNow, when set, is asked for the named users on every request
	// instead of Users, so a reloaded users file applies at once (a user
	// removed from it is refused from the next request on).
	UsersNow func() []Credential
	// ProtectReads requires the token for every /api/ and /metrics request too.
	ProtectReads bool

	MaxBody        int64         // request body limit in bytes; 0: 1 MiB
	RequestTimeout time.Duration // per non-streaming request; 0: 15 s
	Heartbeat      time.Duration // event-stream keep-alive comment period; 0: 15 s
	MaxStreams     int           // open event streams at once; more get 503; 0: 64
	Version        string        // reported by /healthz
	Logger         *slog.Logger  // nil: discard
}

//go:embed web
var webFS embed.FS

type server struct {
	o        Options
	shared   []Credential // the single token's user (none or one)
	log      *slog.Logger
	mux      *http.ServeMux
	requests *prometheus.CounterVec
	gather   prometheus.Gatherer
	streams  atomic.Int64                                   // open event streams
	renders  chan struct{}                                  // semaphore of plot drawings
	ticker   func(time.Duration) (<-chan time.Time, func()) // heartbeat clock; tests inject one
}

// New builds the handler. It fails when Reader is missing or a token file
// is named but cannot be read or is empty. The handler is safe for
// concurrent use.
func New(o Options) (http.Handler, error) {
	if o.Reader == nil {
		return nil, errors.New("api: Options.Reader is required")
	}
	if o.MaxBody <= 0 {
		o.MaxBody = 1 << 20
	}
	if o.RequestTimeout <= 0 {
		o.RequestTimeout = 15 * time.Second
	}
	if o.Heartbeat <= 0 {
		o.Heartbeat = 15 * time.Second
	}
	if o.MaxStreams <= 0 {
		o.MaxStreams = 64
	}
	s := &server{o: o, log: o.Logger, mux: http.NewServeMux(), ticker: realTicker, renders: make(chan struct{}, MaxRenders)}
	if s.log == nil {
		s.log = slog.New(slog.DiscardHandler)
	}
	tok, err := loadToken(o)
	if err != nil {
		return nil, err
	}
	if tok != "" {
		s.shared = []Credential{{User: User{Name: SharedTokenUser, Role: RoleAdmin}, Hash: sha256.Sum256([]byte(tok))}}
	}
	reg := prometheus.NewRegistry()
	s.requests = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "hystd_http_requests_total",
		Help: "HTTP requests answered by the API, by route and status code.",
	}, []string{"route", "code"})
	reg.MustRegister(s.requests, prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Name: "hystd_http_event_streams",
		Help: "Event streams (GET /api/v1/events) open now.",
	}, func() float64 { return float64(s.streams.Load()) }))
	s.gather = reg
	if o.Gatherer != nil {
		s.gather = prometheus.Gatherers{o.Gatherer, reg}
	}
	s.routes()
	return s, nil
}

func loadToken(o Options) (string, error) {
	if o.Token != "" {
		return o.Token, nil
	}
	if o.TokenFile != "" {
		b, err := os.ReadFile(o.TokenFile)
		if err != nil {
			return "", fmt.Errorf("api: token file: %w", err)
		}
		line, _, _ := strings.Cut(string(b), "\n")
		if t := strings.TrimSpace(line); t != "" {
			return t, nil
		}
		return "", fmt.Errorf("api: token file %s: first line is empty", o.TokenFile)
	}
	if o.TokenEnv != "" {
		return strings.TrimSpace(os.Getenv(o.TokenEnv)), nil
	}
	return "", nil
}

func (s *server) routes() {
	reads := Role(0)
	if s.o.ProtectReads {
		reads = RoleReview
	}
	read := func(route string, h http.HandlerFunc) {
		s.mux.Handle("GET "+route, s.wrap(route, reads, true, h))
	}
	write := func(route, what string, need Role, h http.HandlerFunc) {
		s.mux.Handle("POST "+route, s.wrap(route, need, true, func(w http.ResponseWriter, r *http.Request) {
			if u, _ := UserFrom(r.Context()); u.Role < need {
				writeError(w, http.StatusForbidden, "user %s has role %s: %s needs role %s or above", u.Name, u.Role, what, need)
				return
			}
			h(w, r)
		}))
	}
	s.mux.Handle("GET /healthz", s.wrap("/healthz", 0, true, s.health))
	s.mux.Handle("GET /metrics", s.wrap("/metrics", reads, true,
		promhttp.HandlerFor(s.gather, promhttp.HandlerOpts{}).ServeHTTP))
	read("/api/v1/info", s.info)
	read("/api/v1/runs", s.listRuns)
	read("/api/v1/runs/{id}", s.getRun)
	read("/api/v1/runs/{id}/loops/{n}", s.getLoop)
	read("/api/v1/runs/{id}/loops/{n}/plot", s.plotLoop)
	read("/api/v1/trend", s.trend)
	// The event stream has no request timeout: it lives as long as the client.
	s.mux.Handle("GET /api/v1/events", s.wrap("/api/v1/events", reads, false, s.events))
	write("/api/v1/runs", "starting a run", RoleOperate, s.submit)
	write("/api/v1/runs/{id}/abort", "aborting a run", RoleOperate, s.abort)
	write("/api/v1/runs/{id}/mount", "confirming a mount", RoleOperate, s.confirmMount)
	write("/api/v1/runs/{id}/reprocess", "re-processing a run", RoleAdmin, s.reprocess)
	read("/api/v1/mounts", s.listMounts)
	read("/api/v1/specimens", s.listSpecimens)
	read("/api/v1/runs/{id}/report", s.report)
	read("/api/v1/outbox", s.outboxList)
	write("/api/v1/outbox/requeue", "requeuing the outbox", RoleAdmin, s.outboxRequeue)
	write("/api/v1/imports", "importing a recording", RoleOperate, s.importRecording)
	s.mux.Handle("/api/", s.wrap("/api/", 0, true, func(w http.ResponseWriter, r *http.Request) {
		writeError(w, http.StatusNotFound, "no such API endpoint: %s %s", r.Method, r.URL.Path)
	}))
	sub, _ := fs.Sub(webFS, "web")
	files := http.FileServerFS(sub)
	s.mux.Handle("/", s.wrap("/", 0, true, func(w http.ResponseWriter, r *http.Request) {
		if r.Method != http.MethodGet && r.Method != http.MethodHead {
			w.Header().Set("Allow", "GET, HEAD")
			writeError(w, http.StatusMethodNotAllowed, "%s %s: the page is read-only", r.Method, r.URL.Path)
			return
		}
		w.Header().Set("Cache-Control", "no-cache")
		files.ServeHTTP(w, r)
	}))
}

// ServeHTTP implements http.Handler.
func (s *server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	h := w.Header()
	h.Set("X-Content-Type-Options", "nosniff")
	h.Set("X-Frame-Options", "DENY")
	h.Set("Referrer-Policy", "no-referrer")
	h.Set("Content-Security-Policy", "default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; connect-src 'self'; frame-ancestors 'none'")
	s.mux.ServeHTTP(w, r)
}

// statusWriter remembers the status code for metrics and logs.
type statusWriter struct {
	http.ResponseWriter
	code int
}

func (w *statusWriter) WriteHeader(c int) {
	if w.code == 0 {
		w.code = c
	}
	w.ResponseWriter.WriteHeader(c)
}

func (w *statusWriter) Write(b []byte) (int, error) {
	if w.code == 0 {
		w.code = http.StatusOK
	}
	return w.ResponseWriter.Write(b)
}

// Unwrap lets http.ResponseController reach Flush and deadlines.
func (w *statusWriter) Unwrap() http.ResponseWriter { return w.ResponseWriter }

// wrap adds panic recovery, authentication (need > 0: a token of a user;
// the user is then in the request's context, UserFrom), the body limit, the
// request timeout and accounting to h. The role itself is checked by the
// route (write), which names the action refused.
func (s *server) wrap(route string, need Role, timeout bool, h http.HandlerFunc) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		sw := &statusWriter{ResponseWriter: w}
		start := time.Now()
		defer func() {
			if p := recover(); p != nil {
				s.log.Error("api: handler panic", "route", route, "panic", fmt.Sprint(p))
				if sw.code == 0 {
					writeError(sw, http.StatusInternalServerError, "internal error")
				}
			}
			code := sw.code
			if code == 0 {
				code = http.StatusOK
			}
			s.requests.WithLabelValues(route, strconv.Itoa(code)).Inc()
			s.log.Debug("api: request", "method", r.Method, "path", r.URL.Path, "code", code, "took", time.Since(start))
		}()
		if need > 0 {
			u, ok := s.authorized(sw, r)
			if !ok {
				return
			}
			r = r.WithContext(WithUser(r.Context(), u))
		}
		r.Body = http.MaxBytesReader(sw, r.Body, s.o.MaxBody)
		if timeout {
			ctx, cancel := context.WithTimeout(r.Context(), s.o.RequestTimeout)
			defer cancel()
			r = r.WithContext(ctx)
		}
		h(sw, r)
	})
}

// creds are who may act now: the named users and the single token's user;
// none: mutations are refused.
func (s *server) creds() []Credential {
	users := s.o.Users
	if s.o.UsersNow != nil {
		users = s.o.UsersNow()
	}
	return append(users[:len(users):len(users)], s.shared...)
}

// authorized finds the user of the bearer token and answers 401 or 403
// when there is none.
func (s *server) authorized(w http.ResponseWriter, r *http.Request) (User, bool) {
	creds := s.creds()
	if len(creds) == 0 {
		writeError(w, http.StatusForbidden, "no API token is configured on this daemon; this request is disabled")
		return User{}, false
	}
	scheme, tok, ok := strings.Cut(r.Header.Get("Authorization"), " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") || strings.TrimSpace(tok) == "" {
		w.Header().Set("WWW-Authenticate", `Bearer realm="hystd"`)
		writeError(w, http.StatusUnauthorized, "missing bearer token: send the header Authorization: Bearer TOKEN")
		return User{}, false
	}
	u, ok := lookup(creds, strings.TrimSpace(tok))
	if !ok {
		w.Header().Set("WWW-Authenticate", `Bearer realm="hystd", error="invalid_token"`)
		writeError(w, http.StatusUnauthorized, "bearer token not accepted")
		return User{}, false
	}
	return u, true
}
