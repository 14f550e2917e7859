package clock

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"strconv"
	"strings"
	"sync/atomic"
	"time"
)

// Handler serves s to another process (a daemon child driving a bench that
// lives in the caller's process): GET /now answers the present as Unix
// nanoseconds; POST /sleep?until=NS is the remote actor's SleepUntil — it
// answers once s has reached NS, and a request dropped by the client (its
// process killed) withdraws the sleep. Serve it on loopback only.
func Handler(s *Sim) http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /now", func(w http.ResponseWriter, r *http.Request) {
		fmt.Fprintln(w, s.Now().UnixNano())
	})
	mux.HandleFunc("POST /sleep", func(w http.ResponseWriter, r *http.Request) {
		ns, err := strconv.ParseInt(r.URL.Query().Get("until"), 10, 64)
		if err != nil {
			http.Error(w, "until: want Unix nanoseconds", http.StatusBadRequest)
			return
		}
		if err := s.SleepUntil(r.Context(), time.Unix(0, ns)); err != nil {
			return // the client is gone
		}
		fmt.Fprintln(w, s.Now().UnixNano())
	})
	return mux
}

// Remote is a Clock served by Handler in another process: the actor's
// sleeps and every Now go to the serving process's simulated time.
type Remote struct {
	base string
	c    *http.Client
	last atomic.Int64 // the latest present read, Unix ns
}

var _ Clock = (*Remote)(nil)

// Dial returns the clock served at base (e.g. "http://127.0.0.1:7001") after
// checking that it answers.
func Dial(ctx context.Context, base string) (*Remote, error) {
	u, err := url.Parse(base)
	if err != nil || (u.Scheme != "http") || u.Host == "" {
		return nil, fmt.Errorf("clock %q: want http://HOST:PORT", base)
	}
	r := &Remote{base: strings.TrimRight(base, "/"), c: &http.Client{}}
	if _, err := r.now(ctx); err != nil {
		return nil, err
	}
	return r, nil
}

// Now returns the served clock's present, or the latest one read when the
// server cannot be reached (its process is gone; SleepUntil then fails, so
// a run ends and halts).
func (r *Remote) Now() time.Time {
	t, err := r.now(context.Background())
	if err != nil {
		return time.Unix(0, r.last.Load())
	}
	return t
}

func (*Remote) simulated() {}

// SleepUntil sleeps on the served clock.
func (r *Remote) SleepUntil(ctx context.Context, t time.Time) error {
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, r.base+"/sleep?until="+strconv.FormatInt(t.UnixNano(), 10), nil)
	if err != nil {
		return err
	}
	_, err = r.do(req)
	if err != nil && ctx.Err() != nil {
		return ctx.Err()
	}
	return err
}

func (r *Remote) now(ctx context.Context) (time.Time, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, r.base+"/now", nil)
	if err != nil {
		return time.Time{}, err
	}
	return r.do(req)
}

func (r *Remote) do(req *http.Request) (time.Time, error) {
	resp, err := r.c.Do(req)
	if err != nil {
		return time.Time{}, fmt.Errorf("clock %s: %w", r.base, err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(io.LimitReader(resp.Body, 64))
	if err != nil {
		return time.Time{}, fmt.Errorf("clock %s: %w", r.base, err)
	}
	if resp.StatusCode != http.StatusOK {
		return time.Time{}, fmt.Errorf("clock %s: %s: %s", r.base, resp.Status, strings.TrimSpace(string(body)))
	}
	ns, err := strconv.ParseInt(strings.TrimSpace(string(body)), 10, 64)
	if err != nil {
		return time.Time{}, errors.New("clock " + r.base + ": reply is not Unix nanoseconds")
	}
	r.last.Store(ns)
	return time.Unix(0, ns), nil
}
