// Package sampler reads every channel of a fixture at once: one goroutine
// per instrument (so one per port), all started together for each sample,
// each reading stamped by its instrument driver at the midpoint of its
// request and reply.
package sampler

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"hystd/acq/record"
	"hystd/drivers/instr"
)

// Roles are the instruments of a fixture. Supply and Integrator are
// required; FieldMeter and Thermometer may be nil (their channels are NaN).
type Roles struct {
	Supply      instr.Supply
	Integrator  instr.Integrator
	FieldMeter  instr.FieldMeter
	Thermometer instr.Thermometer
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

// channel is one worker's job: fill its fields of the sample.
type channel func(ctx context.Context, s *record.Sample) ([]instr.Reading, error)

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
	fill     record.Sample // only this worker's channels are meaningful
	readings []instr.Reading
	err      error
}

// New starts one goroutine per instrument. start is the run's start time
// (from time.Now, so monotonic): Sample.T is measured from it.
func New(r Roles, start time.Time) (*Sampler, error) {
	if r.Supply == nil || r.Integrator == nil {
		return nil, errors.New("sampler: a supply and an integrator are required")
	}
	s := &Sampler{start: start}
	s.add("supply", func(ctx context.Context, out *record.Sample) ([]instr.Reading, error) {
		i, err := r.Supply.ReadCurrent(ctx)
		if err != nil {
			return nil, fmt.Errorf("current: %w", err)
		}
		out.I = i.Value
		v, err := r.Supply.ReadVoltage(ctx)
		if err != nil {
			return []instr.Reading{i}, fmt.Errorf("voltage: %w", err)
		}
		out.V = v.Value
		return []instr.Reading{i, v}, nil
	})
	s.add("integrator", func(ctx context.Context, out *record.Sample) ([]instr.Reading, error) {
		psi, err := r.Integrator.ReadFlux(ctx)
		if err != nil {
			return nil, err
		}
		out.Psi = psi.Value
		return []instr.Reading{psi}, nil
	})
	if r.FieldMeter != nil {
		s.add("field_meter", func(ctx context.Context, out *record.Sample) ([]instr.Reading, error) {
			b, err := r.FieldMeter.ReadField(ctx)
			if err != nil {
				return nil, err
			}
			out.BProbe = b.Value
			return []instr.Reading{b}, nil
		})
	}
	if r.Thermometer != nil {
		s.add("thermometer", func(ctx context.Context, out *record.Sample) ([]instr.Reading, error) {
			th, err := r.Thermometer.ReadTemperature(ctx)
			if err != nil {
				return nil, err
			}
			out.TempC = th.Value
			return []instr.Reading{th}, nil
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
		var fill record.Sample
		rs, err := w.read(rq.ctx, &fill)
		if err != nil {
			err = fmt.Errorf("%s: %w", w.role, err)
		}
		rq.reply <- result{role: w.role, fill: fill, readings: rs, err: err}
	}
}

// Read reads every channel at once and returns the sample: I and V from
// the supply, Psi from the integrator, BProbe and TempC when present (NaN
// otherwise), T the mean of the readings' midpoints since start, TUnc the
// largest |midpoint − T| + half round trip, so that every reading's own
// interval lies within T ± TUnc. Phase and Setpoint are left for the caller.
//
// When a channel fails, Read still waits for the others, returns the sample
// with NaN in the failed channels and an error naming each failed role.
func (s *Sampler) Read(ctx context.Context) (record.Sample, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	nan := math.NaN()
	out := record.Sample{I: nan, V: nan, Psi: nan, BProbe: nan, TempC: nan}
	if s.closed {
		return out, errors.New("sampler: closed")
	}
	replies := make(chan result, len(s.workers))
	for _, w := range s.workers {
		w.req <- request{ctx: ctx, reply: replies}
	}
	var all []instr.Reading
	var errs []error
	for range s.workers {
		r := <-replies
		all = append(all, r.readings...)
		if r.err != nil {
			errs = append(errs, r.err)
		}
		switch r.role {
		case "supply":
			if len(r.readings) > 0 {
				out.I = r.fill.I
			}
			if len(r.readings) > 1 {
				out.V = r.fill.V
			}
		case "integrator":
			if r.err == nil {
				out.Psi = r.fill.Psi
			}
		case "field_meter":
			if r.err == nil {
				out.BProbe = r.fill.BProbe
			}
		case "thermometer":
			if r.err == nil {
				out.TempC = r.fill.TempC
			}
		}
	}
	out.T, out.TUnc = Stamp(s.start, all)
	if len(errs) > 0 {
		return out, fmt.Errorf("sampler: %w", errors.Join(errs...))
	}
	return out, nil
}

// Stamp combines readings into one sample time since start: the mean of
// their midpoints, and the half-width that covers every reading's interval
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
