package influx

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net/http"
	"sync"
	"time"

	influxdb2 "github.com/influxdata/influxdb-client-go/v2"
	ihttp "github.com/influxdata/influxdb-client-go/v2/api/http"

	"hystd/acq/record"
	"hystd/acq/store"
)

// Options are the forwarder's injected dependencies; the zero value is fine.
type Options struct {
	// Now is the clock; nil means time.Now.
	Now func() time.Time
	// Sleep waits d or until ctx is done; nil means a timer. Tests inject one
	// that returns at once.
	Sleep func(ctx context.Context, d time.Duration) error
	// Log receives one line per failure and quarantine; nil means slog.Default().
	Log *slog.Logger
	// AfterBatch, if set, is called after each acknowledged batch once its
	// progress is stored (tests stop the process there).
	AfterBatch func(e store.OutboxEntry, done, total int)
}

// Forwarder drains one outbox into one server. Create it with New; Run or
// Drain may be called from one goroutine at a time; Kick and Collectors are
// safe from any goroutine. Close releases the HTTP client.
type Forwarder struct {
	cfg    Config
	ob     store.Outbox
	client influxdb2.Client
	w      lineWriter
	enc    Encoding
	o      Options
	m      *metrics
	kick   chan struct{}
	mu     sync.Mutex // serializes passes
}

// New checks cfg (with defaults applied), reads the token and prepares the
// client. It does not contact the server.
func New(cfg Config, ob store.Outbox, o Options) (*Forwarder, error) {
	cfg = cfg.WithDefaults()
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	tok, err := cfg.token()
	if err != nil {
		return nil, fmt.Errorf("influx config: %w", err)
	}
	tc, err := cfg.tlsConfig()
	if err != nil {
		return nil, fmt.Errorf("influx config: %w", err)
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	if o.Sleep == nil {
		o.Sleep = sleep
	}
	if o.Log == nil {
		o.Log = slog.Default()
	}
	opts := influxdb2.DefaultOptions().
		SetPrecision(time.Nanosecond).
		SetUseGZip(cfg.Gzip).
		SetLogLevel(0).
		SetHTTPRequestTimeout(uint(cfg.Timeout.D().Seconds() + 0.999)).
		SetApplicationName("hystd")
	if tc != nil {
		opts.SetTLSConfig(tc)
	}
	var w lineWriter
	var client influxdb2.Client
	switch cfg.API {
	case APIv1:
		auth, err := v1Auth(tok)
		if err != nil {
			return nil, fmt.Errorf("influx config: %w", err)
		}
		client = influxdb2.NewClientWithOptions(cfg.URL, "", opts)
		w = newV1Writer(client.HTTPService(), cfg, auth)
	default:
		client = influxdb2.NewClientWithOptions(cfg.URL, tok, opts)
		w = client.WriteAPIBlocking(cfg.Org, cfg.Bucket)
	}
	f := &Forwarder{
		cfg: cfg, ob: ob, client: client, o: o, w: w,
		enc:  Encoding{Tags: cfg.Tags},
		m:    newMetrics(ob, o.Now),
		kick: make(chan struct{}, 1),
	}
	return f, nil
}

// Close releases the client's connections.
func (f *Forwarder) Close() { f.client.Close() }

// Kick wakes an idle Run at once (call it after committing a loop).
func (f *Forwarder) Kick() {
	select {
	case f.kick <- struct{}{}:
	default:
	}
}

func sleep(ctx context.Context, d time.Duration) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// TemporaryError is a failed write worth retrying (network error, 429, 5xx,
// or a server that refuses the credentials or bucket for now).
type TemporaryError struct {
	Status     int           // HTTP status, 0 for a network error
	RetryAfter time.Duration // the server's Retry-After, 0 if none
	Msg        string
}

func (e *TemporaryError) Error() string {
	if e.Status == 0 {
		return "write failed: " + e.Msg
	}
	return fmt.Sprintf("write failed: HTTP %d: %s", e.Status, e.Msg)
}

// classify turns a client error into a quarantine message (permanent) or a
// *TemporaryError.
func classify(err error) (permanent string, temp *TemporaryError) {
	var he *ihttp.Error
	if errors.As(err, &he) && he.StatusCode != 0 {
		msg := he.Message
		if msg == "" {
			msg = he.Error()
		}
		switch he.StatusCode {
		case http.StatusBadRequest, http.StatusUnprocessableEntity:
			return fmt.Sprintf("HTTP %d: %s", he.StatusCode, msg), nil
		}
		return "", &TemporaryError{Status: he.StatusCode, RetryAfter: time.Duration(he.RetryAfter) * time.Second, Msg: msg}
	}
	return "", &TemporaryError{Msg: err.Error()}
}

// pass sends every pending entry once. It returns the number of points
// acknowledged and stops at the first temporary failure, which it returns.
// Loading and encoding the next loop overlaps with sending the current one.
func (f *Forwarder) pass(ctx context.Context) (int, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	sent := 0
	for {
		entries, err := f.ob.Pending(ctx, 100)
		if err != nil {
			return sent, err
		}
		if len(entries) == 0 {
			return sent, nil
		}
		n, err := f.sendAll(ctx, entries)
		sent += n
		if err != nil {
			return sent, err
		}
	}
}

type prepared struct {
	e     store.OutboxEntry
	lines []string
	err   error
}

// sendAll sends entries in order; one goroutine prepares the lines of the
// next entry while the current one is on the wire.
func (f *Forwarder) sendAll(ctx context.Context, entries []store.OutboxEntry) (int, error) {
	pctx, cancel := context.WithCancel(ctx)
	defer cancel()
	next := make(chan prepared, 1)
	go func() {
		defer close(next)
		for _, e := range entries {
			lines, err := f.points(pctx, e)
			select {
			case next <- prepared{e, lines, err}:
			case <-pctx.Done():
				return
			}
		}
	}()
	sent := 0
	for p := range next {
		n, err := f.send(ctx, p)
		sent += n
		if err != nil {
			return sent, err
		}
	}
	return sent, ctx.Err()
}

// send delivers one prepared entry from its stored progress on.
func (f *Forwarder) send(ctx context.Context, p prepared) (int, error) {
	e, pts, err := p.e, p.lines, p.err
	if err != nil {
		var perm *permanentError
		if errors.As(err, &perm) {
			return 0, f.quarantine(ctx, e, perm.msg)
		}
		return 0, err
	}
	sent := 0
	done := e.Done
	if done > len(pts) {
		done = len(pts)
	}
	bs := f.cfg.BatchSize
	for done < len(pts) {
		end := min(done+bs, len(pts))
		werr := f.w.WriteRecord(ctx, pts[done:end]...)
		if werr != nil {
			if ctx.Err() != nil {
				return sent, ctx.Err()
			}
			perm, temp := classify(werr)
			if temp != nil && temp.Status == http.StatusRequestEntityTooLarge {
				if bs > 1 { // the server's request limit: halve the batch and go on at once
					bs = max(1, bs/2)
					f.o.Log.Warn("influx: request too large, halving the batch", "points", bs)
					continue
				}
				perm = "HTTP 413: a single point is larger than the server accepts: " + temp.Msg
			}
			if perm != "" {
				return sent, f.quarantine(ctx, e, perm)
			}
			f.m.failures.WithLabelValues("retry").Inc()
			f.o.Log.Warn("influx: write failed, will retry", "run", e.RunID, "loop", e.Loop, "err", temp.Error())
			if rerr := f.ob.Retry(ctx, e.ID, temp.Error()); rerr != nil {
				return sent, errors.Join(temp, rerr)
			}
			return sent, temp
		}
		n := end - done
		sent += n
		done = end
		f.m.points.Add(float64(n))
		f.m.batches.Inc()
		if err := f.ob.Progress(ctx, e.ID, done); err != nil {
			return sent, err
		}
		if f.o.AfterBatch != nil {
			f.o.AfterBatch(e, done, len(pts))
		}
	}
	if err := f.ob.Delivered(ctx, e.ID); err != nil {
		return sent, err
	}
	f.m.loops.Inc()
	f.m.lastOK.Set(float64(f.o.Now().UnixNano()) / 1e9)
	return sent, nil
}

type permanentError struct{ msg string }

func (e *permanentError) Error() string { return e.msg }

// points returns the entry's loop as lines (Lines: the same points, in the
// same order, as Points).
func (f *Forwarder) points(ctx context.Context, e store.OutboxEntry) ([]string, error) {
	r, err := f.ob.Run(ctx, e.RunID)
	if errors.Is(err, record.ErrNotFound) {
		return nil, &permanentError{"not in the store: " + err.Error()}
	}
	if err != nil {
		return nil, err
	}
	l, err := f.ob.LoopOf(ctx, e.RunID, e.Loop, max(e.Revision, 1))
	if errors.Is(err, record.ErrNotFound) {
		return nil, &permanentError{"not in the store: " + err.Error()}
	}
	if err != nil {
		return nil, err
	}
	if l.Revision > 1 {
		// A later revision is tagged with its own specimen.
		revs, err := f.ob.Revisions(ctx, e.RunID)
		if err != nil {
			return nil, err
		}
		for _, v := range revs {
			if v.N == l.Revision {
				r = r.At(v)
			}
		}
	}
	pts, err := f.enc.Lines(r, l)
	if err != nil {
		// The stored loop cannot be encoded (no start time, a tag the
		// encoder refuses): sending it again will not help.
		return nil, &permanentError{"cannot encode: " + err.Error()}
	}
	return pts, nil
}

func (f *Forwarder) quarantine(ctx context.Context, e store.OutboxEntry, msg string) error {
	f.m.failures.WithLabelValues("quarantine").Inc()
	f.o.Log.Error("influx: loop quarantined", "run", e.RunID, "loop", e.Loop, "server", msg)
	return f.ob.Quarantine(ctx, e.ID, msg)
}

// backoff is the wait before retry number n (n ≥ 1) after err.
func (f *Forwarder) backoff(n int, err error) time.Duration {
	d := f.cfg.MinBackoff.D()
	for i := 1; i < n && d < f.cfg.MaxBackoff.D(); i++ {
		d *= 2
	}
	d = min(d, f.cfg.MaxBackoff.D())
	var te *TemporaryError
	if errors.As(err, &te) && te.RetryAfter > d {
		d = min(te.RetryAfter, f.cfg.MaxBackoff.D())
	}
	return d
}

// Run forwards until ctx is done: it drains the outbox, waits PollInterval
// (or a Kick) when it is empty, and backs off after a temporary failure.
// It returns ctx's error; a store error is logged and retried like a
// network error.
func (f *Forwarder) Run(ctx context.Context) error {
	fails := 0
	for {
		_, err := f.pass(ctx)
		if ctx.Err() != nil {
			return ctx.Err()
		}
		var wait time.Duration
		if err != nil {
			fails++
			wait = f.backoff(fails, err)
			var te *TemporaryError
			if !errors.As(err, &te) {
				f.o.Log.Error("influx: forwarder", "err", err)
			}
		} else {
			fails = 0
			wait = f.cfg.PollInterval.D()
		}
		wctx, cancel := context.WithCancel(ctx)
		go func() {
			select {
			case <-f.kick:
				if err == nil {
					cancel()
				}
			case <-wctx.Done():
			}
		}()
		serr := f.o.Sleep(wctx, wait)
		cancel()
		if ctx.Err() != nil {
			return ctx.Err()
		}
		_ = serr
	}
}

// Drain sends everything pending, retrying with backoff, until the outbox
// has no pending entry (quarantined ones do not count) or ctx is done. It
// returns the points acknowledged and, if ctx ended first, an error naming
// the last failure.
func (f *Forwarder) Drain(ctx context.Context) (int, error) {
	total, fails := 0, 0
	for {
		n, err := f.pass(ctx)
		total += n
		if err == nil {
			return total, nil
		}
		if ctx.Err() != nil {
			return total, fmt.Errorf("influx: gave up with loops pending: %w (last: %v)", ctx.Err(), err)
		}
		fails++
		if serr := f.o.Sleep(ctx, f.backoff(fails, err)); serr != nil {
			return total, fmt.Errorf("influx: gave up with loops pending: %w (last: %v)", serr, err)
		}
	}
}

// DeliverAll sends every pending loop of ob to the server of cfg and waits
// until all are delivered or ctx is done (give it a deadline). It returns the
// points acknowledged.
func DeliverAll(ctx context.Context, ob store.Outbox, cfg Config) (int, error) {
	f, err := New(cfg, ob, Options{})
	if err != nil {
		return 0, err
	}
	defer f.Close()
	return f.Drain(ctx)
}
