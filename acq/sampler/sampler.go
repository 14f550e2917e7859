// Package sampler reads every channel of a fixture at once: one goroutine
// per instrument (so one per port), all started together for each sample,
// each reading stamped by its instrument driver at the midpoint of its
// request and reply. It is the one concurrent reader of the project: the
// engine samples through it.
package sampler

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"hystd/acq/record"
	"hystd/drivers/instr"
)

// Roles are the instruments of a fixture (instr.Set). Supply is required;
// Integrator, FieldMeter and Thermometer may be nil (their channels are NaN).
type Roles = instr.Set

// Options choose what a Read reads besides the measured channels.
type Options struct {
	// Status also reads, in every Read, the supply's status register and
	// the integrator's overload flag (Reading.Status, Reading.Overload).
	Status bool
}

// Reading is one Read: the sample and, with Options.Status, the supply's
// status and the integrator's overload flag.
type Reading struct {
	Sample   record.Sample
	Status   instr.SupplyStatus
	Overload bool
}

// RoleError is the I/O error of one instrument role in a Read. Role is the
// role's label (instr.RoleLabel): "supply", "integrator", "field meter" or
// "thermometer".
type RoleError struct {
	Role string
	Err  error
}

func (e *RoleError) Error() string { return fmt.Sprintf("%s: %v", e.Role, e.Err) }
func (e *RoleError) Unwrap() error { return e.Err }

// retriesKey carries the counter of re-read replies in a Read's context.
type retriesKey struct{}

// WithRetryCounter returns ctx carrying n: every late reply a Read reads
// again (see Sampler.Read) adds one to n. n is updated atomically.
func WithRetryCounter(ctx context.Context, n *atomic.Int64) context.Context {
	return context.WithValue(ctx, retriesKey{}, n)
}

// Retry calls f again after a read timeout (the line is still up: a reply
// was lost or late: instr.ErrTimeout) or a reply that did not answer its query (instr.ErrOutOfStep:
// the driver resynchronises the line first) until ctx ends, counting each repeat in the counter of
// WithRetryCounter. Any other error, a disconnect among them, is returned
// at once: after a hang-up the instrument's state cannot be trusted within
// a loop.
func Retry[T any](ctx context.Context, f func(context.Context) (T, error)) (T, error) {
	for {
		v, err := f(ctx)
		if err == nil || !(errors.Is(err, instr.ErrTimeout) || errors.Is(err, instr.ErrOutOfStep)) || ctx.Err() != nil {
			return v, err
		}
		if n, ok := ctx.Value(retriesKey{}).(*atomic.Int64); ok {
			n.Add(1)
		}
	}
}

// Sampler reads all channels concurrently. Read may be called from one
// goroutine at a time. Read returns only after every instrument finished its
// I/O, so between Reads the caller may use the instruments itself (set the
// supply, Halt); never during a Read. The Sampler does not close the
// instruments; Close stops its goroutines.
type Sampler struct {
	start   time.Time
	workers []*worker
	mu      sync.Mutex
	closed  bool
}

// Channel kinds: which time a reading stands for.
const (
	kindOther = iota
	kindCurrent
	kindFlux
	kindField
)

// stamped is one reading with the channel it belongs to.
type stamped struct {
	r    instr.Reading
	kind int
}

// channel is one worker's job: fill its fields of the reading.
type channel func(ctx context.Context, out *Reading) ([]stamped, error)

type worker struct {
	role string
	read channel
	req  chan request
	done chan struct{}
}

type request struct {
	ctx   context.Context
	reply chan<- result
}

type result struct {
	role     string
	fill     Reading // only this worker's fields are meaningful
	readings []stamped
	err      error
}

// New is NewWith without options: the measured channels only.
func New(r Roles, start time.Time) (*Sampler, error) { return NewWith(r, start, Options{}) }

// NewWith starts one goroutine per instrument. start is the run's start
// time (from the same clock as the drivers' stamps, time.Now for real
// drivers): Sample.T is measured from it.
func NewWith(r Roles, start time.Time, o Options) (*Sampler, error) {
	if r.Supply == nil {
		return nil, errors.New("sampler: a supply is required")
	}
	s := &Sampler{start: start}
	s.add(instr.RoleSupply, func(ctx context.Context, out *Reading) ([]stamped, error) {
		i, err := Retry(ctx, r.Supply.ReadCurrent)
		if err != nil {
			return nil, fmt.Errorf("read current: %w", err)
		}
		out.Sample.I = i.Value
		got := []stamped{{i, kindCurrent}}
		v, err := Retry(ctx, r.Supply.ReadVoltage)
		if err != nil {
			return got, fmt.Errorf("read voltage: %w", err)
		}
		out.Sample.V = v.Value
		got = append(got, stamped{v, kindOther})
		if o.Status {
			st, err := Retry(ctx, r.Supply.Status)
			if err != nil {
				return got, fmt.Errorf("read status: %w", err)
			}
			out.Status = st
		}
		return got, nil
	})
	if r.Integrator != nil {
		s.add(instr.RoleIntegrator, func(ctx context.Context, out *Reading) ([]stamped, error) {
			psi, err := Retry(ctx, r.Integrator.ReadFlux)
			if err != nil {
				return nil, fmt.Errorf("read flux: %w", err)
			}
			out.Sample.Psi = psi.Value
			got := []stamped{{psi, kindFlux}}
			if o.Status {
				ov, err := Retry(ctx, r.Integrator.Overloaded)
				if err != nil {
					return got, fmt.Errorf("read overload: %w", err)
				}
				out.Overload = ov
			}
			return got, nil
		})
	}
	if r.FieldMeter != nil {
		s.add(instr.RoleFieldMeter, func(ctx context.Context, out *Reading) ([]stamped, error) {
			b, err := Retry(ctx, r.FieldMeter.ReadField)
			if err != nil {
				return nil, fmt.Errorf("read field: %w", err)
			}
			out.Sample.BProbe = b.Value
			return []stamped{{b, kindField}}, nil
		})
	}
	if r.Thermometer != nil {
		s.add(instr.RoleThermometer, func(ctx context.Context, out *Reading) ([]stamped, error) {
			th, err := Retry(ctx, r.Thermometer.ReadTemperature)
			if err != nil {
				return nil, fmt.Errorf("read temperature: %w", err)
			}
			out.Sample.TempC = th.Value
			return []stamped{{th, kindOther}}, nil
		})
	}
	return s, nil
}

func (s *Sampler) add(role string, read channel) {
	w := &worker{role: role, read: read, req: make(chan request), done: make(chan struct{})}
	s.workers = append(s.workers, w)
	go w.loop()
}

func (w *worker) loop() {
	defer close(w.done)
	for rq := range w.req {
		var fill Reading
		rs, err := w.read(rq.ctx, &fill)
		if err != nil {
			err = &RoleError{Role: instr.RoleLabel(w.role), Err: err}
		}
		rq.reply <- result{role: w.role, fill: fill, readings: rs, err: err}
	}
}

// Read is ReadAll's sample.
func (s *Sampler) Read(ctx context.Context) (record.Sample, error) {
	r, err := s.ReadAll(ctx)
	return r.Sample, err
}

// ReadAll reads every channel at once and returns the sample: I and V
// from the supply, Psi from the integrator, BProbe and TempC when present
// (NaN otherwise). Time: T is the flux reading's midpoint since start (the
// current's without an integrator); DtI and DtB are the current's and the
// field meter's midpoints minus T; TUnc is the largest half round trip of
// the readings, the uncertainty of each channel's own time. Phase and
// Setpoint are left for the caller. A reply that times out while the line
// is up is read again (Retry) until ctx ends.
//
// When a channel fails, ReadAll still waits for the others and returns the
// sample with NaN in the failed channels, and the errors joined, each a
// *RoleError naming its role, in the order the roles were given (supply,
// integrator, field meter, thermometer).
func (s *Sampler) ReadAll(ctx context.Context) (Reading, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	nan := math.NaN()
	out := Reading{Sample: record.Sample{I: nan, V: nan, Psi: nan, BProbe: nan, TempC: nan}}
	if s.closed {
		return out, errors.New("sampler: closed")
	}
	replies := make(chan result, len(s.workers))
	for _, w := range s.workers {
		w.req <- request{ctx: ctx, reply: replies}
	}
	var all []stamped
	errs := make([]error, len(s.workers))
	for range s.workers {
		r := <-replies
		all = append(all, r.readings...)
		for k, w := range s.workers {
			if w.role == r.role {
				errs[k] = r.err
			}
		}
		has := func(kind int) bool {
			for _, x := range r.readings {
				if x.kind == kind {
					return true
				}
			}
			return false
		}
		switch r.role {
		case instr.RoleSupply:
			if has(kindCurrent) {
				out.Sample.I = r.fill.Sample.I
			}
			if len(r.readings) > 1 {
				out.Sample.V = r.fill.Sample.V
			}
			out.Status = r.fill.Status
		case instr.RoleIntegrator:
			if has(kindFlux) {
				out.Sample.Psi = r.fill.Sample.Psi
			}
			out.Overload = r.fill.Overload
		case instr.RoleFieldMeter:
			if r.err == nil {
				out.Sample.BProbe = r.fill.Sample.BProbe
			}
		case instr.RoleThermometer:
			if r.err == nil {
				out.Sample.TempC = r.fill.Sample.TempC
			}
		}
	}
	out.Sample.T, out.Sample.DtI, out.Sample.DtB, out.Sample.TUnc = stampAll(s.start, all)
	if err := errors.Join(errs...); err != nil {
		return out, err
	}
	return out, nil
}

// stampAll places a sample in time: t is the flux reading's midpoint since
// start (the current's when there is no flux reading, the mean of all
// midpoints when there is neither), dtI and dtB the current's and field
// meter's midpoints minus t (0 when absent), unc the largest half round trip.
func stampAll(start time.Time, rs []stamped) (t, dtI, dtB, unc time.Duration) {
	var flux, cur, field *instr.Reading
	var plain []instr.Reading
	for k := range rs {
		r := &rs[k]
		switch r.kind {
		case kindFlux:
			flux = &r.r
		case kindCurrent:
			cur = &r.r
		case kindField:
			field = &r.r
		}
		plain = append(plain, r.r)
		unc = max(unc, r.r.AtUncertainty)
	}
	switch {
	case flux != nil:
		t = flux.At.Sub(start)
	case cur != nil:
		t = cur.At.Sub(start)
	default:
		t, _ = Stamp(start, plain)
	}
	if cur != nil {
		dtI = cur.At.Sub(start) - t
	}
	if field != nil {
		dtB = field.At.Sub(start) - t
	}
	return t, dtI, dtB, unc
}

// Stamp combines readings into one time since start: the mean of their
// midpoints, and the half-width that covers every reading's interval
// (midpoint ± its half round trip). No readings give (0, 0).
func Stamp(start time.Time, rs []instr.Reading) (t, unc time.Duration) {
	if len(rs) == 0 {
		return 0, 0
	}
	var sum time.Duration
	for _, r := range rs {
		sum += r.At.Sub(start)
	}
	t = sum / time.Duration(len(rs))
	for _, r := range rs {
		d := r.At.Sub(start) - t
		if d < 0 {
			d = -d
		}
		unc = max(unc, d+r.AtUncertainty)
	}
	return t, unc
}

// Close stops the goroutines (after a pending Read). It does not close
// the instruments. Safe to call more than once.
func (s *Sampler) Close() {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return
	}
	s.closed = true
	for _, w := range s.workers {
		close(w.req)
		<-w.done
	}
}
