// Package sampler reads every channel of a fixture at once, each reading
// stamped by its instrument driver at the midpoint of its request and reply.
// It is the one concurrent reader of the project: the engine samples
// through it.
//
// Instruments that can start a read ahead (instr.Overlapped: every
// drivers/profile instrument) are read by the caller's goroutine in an
// overlapped round: the first query of every such instrument is written
// before any reply is read, and each line's next query goes out as soon as
// its previous reply is in, so one query is in flight on every port at once
// while no instrument gets a second query before it answered the first —
// unless its profile says it accepts more (queued_queries, instr.Queued):
// then up to that many of the line's reads go out back to back as a group
// (the simulated supply's current and voltage), their replies read in
// order. A group is used only whole: when any of its replies is late,
// lost, garbled or out of step (a lost reply shifts the later ones up, so
// the group's last query then has no reply and times out), none of its
// values is used and the whole group is asked again after the driver's
// resync, so a voltage never lands in the current channel.
// The round looks at each line without blocking and, when nothing is in,
// waits on the line whose reply is due first (from the line's last round
// trip) until the next one is due. No goroutine, channel or timer per read:
// go.bug.st/serial reads with a blocking select(2) on one descriptor and
// does not give out the descriptor, so Go's runtime poller cannot watch the
// ports, and one blocked reader per port would be the fan-out this avoids.
// Each reply keeps its own stamps (sent when its query was written,
// received when its terminator was read), so T, DtI, DtB and TUnc stay
// each channel's own midpoint and half round trip; a reply that sat in the
// kernel's buffer while another line was being waited on only widens its
// interval, which still contains the instant it stands for (unless the
// profile's timeout passed meanwhile: it is then late, as in a blocking
// read, and read again after the driver's resync). A queued reply's
// interval runs from its own query's write to its own terminator's read.
// Other instruments (fakes in tests) are read one goroutine each, beside
// the round.
//
// Speed (BenchmarkSampleBesidePyserial, BenchmarkSampleBesideInTurn; the
// figures with their load are in DEVELOPERS.md "Current figures"): on
// emulated 115 200 Bd lines (linktest.ServeLine, full duplex like RS-232)
// the round reaches about 3× the sequential pyserial script's sample rate:
// the script's 4 exchanges in turn take 4 × 25 characters plus a timer's
// overshoot each, the round's busiest port (the supply, 2 queued queries)
// 11 + 14 + 14 characters plus one or two. With instant replies it is
// about as fast as reading in turn (0.88–1.26×, median 1.01×: CPU-bound on
// 2 cores shared with the three responders).
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
		if !again(ctx, err) {
			return v, err
		}
	}
}

// again tells Retry whether to repeat after err, counting the repeat.
func again(ctx context.Context, err error) bool {
	if err == nil || !(errors.Is(err, instr.ErrTimeout) || errors.Is(err, instr.ErrOutOfStep)) || ctx.Err() != nil {
		return false
	}
	if n, ok := ctx.Value(retriesKey{}).(*atomic.Int64); ok {
		n.Add(1)
	}
	return true
}

// Sampler reads all channels at once. Read may be called from one
// goroutine at a time. Read returns only after every instrument finished its
// I/O, so between Reads the caller may use the instruments itself (set the
// supply, Halt); never during a Read. The Sampler does not close the
// instruments; Close stops its goroutines.
type Sampler struct {
	start   time.Time
	lines   []*line   // one per role, in the order of Roles
	workers []*worker // the lines read in goroutines of their own
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

// line is one instrument (one port) and the reads a Read makes on it, in
// order; a line stops at its first failed read.
type line struct {
	role  string
	steps []step
	ov    instr.Overlapped // nil: read in a goroutine of its own
	// queued is how many of the line's reads the overlapped round sends
	// back to back (instr.Queued; 1 without it); q is ov as instr.Queued.
	queued int
	q      instr.Queued
	// rtt is each step's last round trip (machine clock): when its reply
	// is due in the overlapped round.
	rtt []time.Duration
}

// step is one read: r names it for Overlapped.Begin; take makes it (or
// collects it once begun) and returns its stamped reading (ok false for
// status reads, which carry no time) and put, which fills its field of a
// Reading: the overlapped round puts a group of queued reads only once
// all of them are in.
type step struct {
	what string // for errors: "read current"
	r    instr.Read
	take func(ctx context.Context) (s stamped, ok bool, put func(*Reading), err error)
}

// outcome is what one line's reads of one Read gave.
type outcome struct {
	l   *line
	got []stamped
	err error // a *RoleError
}

type worker struct {
	l    *line
	req  chan request
	done chan struct{}
}

type request struct {
	ctx   context.Context
	out   *Reading // the worker writes only its line's fields
	reply chan<- outcome
}

// New is NewWith without options: the measured channels only.
func New(r Roles, start time.Time) (*Sampler, error) { return NewWith(r, start, Options{}) }

// NewWith prepares the reads of every role and starts one goroutine per
// instrument that is not instr.Overlapped. start is the run's start time
// (from the same clock as the drivers' stamps, time.Now for real drivers):
// Sample.T is measured from it.
func NewWith(r Roles, start time.Time, o Options) (*Sampler, error) {
	if r.Supply == nil {
		return nil, errors.New("sampler: a supply is required")
	}
	s := &Sampler{start: start}
	sup := []step{
		reading("read current", instr.ReadCurrent, kindCurrent, r.Supply.ReadCurrent, func(out *Reading, v float64) { out.Sample.I = v }),
		reading("read voltage", instr.ReadVoltage, kindOther, r.Supply.ReadVoltage, func(out *Reading, v float64) { out.Sample.V = v }),
	}
	if o.Status {
		sup = append(sup, state("read status", instr.ReadStatus, r.Supply.Status, func(out *Reading, v instr.SupplyStatus) { out.Status = v }))
	}
	s.add(instr.RoleLabel(instr.RoleSupply), r.Supply, sup)
	if r.Integrator != nil {
		st := []step{reading("read flux", instr.ReadFlux, kindFlux, r.Integrator.ReadFlux, func(out *Reading, v float64) { out.Sample.Psi = v })}
		if o.Status {
			st = append(st, state("read overload", instr.ReadOverload, r.Integrator.Overloaded, func(out *Reading, v bool) { out.Overload = v }))
		}
		s.add(instr.RoleLabel(instr.RoleIntegrator), r.Integrator, st)
	}
	if r.FieldMeter != nil {
		s.add(instr.RoleLabel(instr.RoleFieldMeter), r.FieldMeter, []step{
			reading("read field", instr.ReadField, kindField, r.FieldMeter.ReadField, func(out *Reading, v float64) { out.Sample.BProbe = v })})
	}
	if r.Thermometer != nil {
		s.add(instr.RoleLabel(instr.RoleThermometer), r.Thermometer, []step{
			reading("read temperature", instr.ReadTemperature, kindOther, r.Thermometer.ReadTemperature, func(out *Reading, v float64) { out.Sample.TempC = v })})
	}
	return s, nil
}

// reading is the step of a timed read: its value goes to out by set.
func reading(what string, r instr.Read, kind int, read func(context.Context) (instr.Reading, error), set func(*Reading, float64)) step {
	return step{what: what, r: r, take: func(ctx context.Context) (stamped, bool, func(*Reading), error) {
		v, err := read(ctx)
		if err != nil {
			return stamped{}, false, nil, err
		}
		return stamped{v, kind}, true, func(out *Reading) { set(out, v.Value) }, nil
	}}
}

// state is the step of a read without a time (status, overload).
func state[T any](what string, r instr.Read, read func(context.Context) (T, error), set func(*Reading, T)) step {
	return step{what: what, r: r, take: func(ctx context.Context) (stamped, bool, func(*Reading), error) {
		v, err := read(ctx)
		if err != nil {
			return stamped{}, false, nil, err
		}
		return stamped{}, false, func(out *Reading) { set(out, v) }, nil
	}}
}

func (s *Sampler) add(role string, res instr.Resource, steps []step) {
	l := &line{role: role, steps: steps, rtt: make([]time.Duration, len(steps)), queued: 1}
	s.lines = append(s.lines, l)
	if ov, ok := res.(instr.Overlapped); ok {
		l.ov = ov
		if q, ok := res.(instr.Queued); ok && q.Queued() > 1 {
			l.q, l.queued = q, q.Queued()
		}
		return
	}
	w := &worker{l: l, req: make(chan request), done: make(chan struct{})}
	s.workers = append(s.workers, w)
	go w.loop()
}

func (w *worker) loop() {
	defer close(w.done)
	for rq := range w.req {
		rq.reply <- w.l.readInTurn(rq.ctx, rq.out)
	}
}

// readInTurn makes the line's reads one after another, each repeated as
// Retry says.
func (l *line) readInTurn(ctx context.Context, out *Reading) outcome {
	o := outcome{l: l}
	for _, st := range l.steps {
		var got stamped
		var ok bool
		_, err := Retry(ctx, func(ctx context.Context) (struct{}, error) {
			var put func(*Reading)
			var err error
			got, ok, put, err = st.take(ctx)
			if err == nil {
				put(out)
			}
			return struct{}{}, err
		})
		if err != nil {
			o.err = &RoleError{Role: l.role, Err: fmt.Errorf("%s: %w", st.what, err)}
			return o
		}
		if ok {
			o.got = append(o.got, got)
		}
	}
	return o
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
	// Every line writes only its own fields of out; the goroutines' writes
	// are seen here after their replies are received.
	replies := make(chan outcome, len(s.workers))
	for _, w := range s.workers {
		w.req <- request{ctx: ctx, out: &out, reply: replies}
	}
	res := make(map[*line]outcome, len(s.lines))
	overlap(ctx, s.lines, &out, res)
	for range s.workers {
		o := <-replies
		res[o.l] = o
	}
	var all []stamped
	var errs []error
	for _, l := range s.lines {
		all = append(all, res[l].got...)
		errs = append(errs, res[l].err)
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
