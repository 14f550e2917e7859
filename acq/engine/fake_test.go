package engine

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"hystd/acq/record"
	"hystd/calib/units"
	"hystd/drivers/instr"
)

// fakeClock advances only when the engine waits or an instrument answers:
// time is injected, nothing sleeps.
type fakeClock struct {
	mu  sync.Mutex
	now time.Time
}

func newFakeClock() *fakeClock {
	return &fakeClock{now: time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC)}
}

func (c *fakeClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

func (c *fakeClock) advance(d time.Duration) time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.now = c.now.Add(d)
	return c.now
}

func (c *fakeClock) SleepUntil(ctx context.Context, t time.Time) error {
	c.mu.Lock()
	if t.After(c.now) {
		c.now = t
	}
	c.mu.Unlock()
	return ctx.Err()
}

// latency is what each fake query takes on the fake clock.
const latency = 500 * time.Microsecond

// fakeSupply is a bipolar supply with a slew limit driving an R–L winding.
// It keeps the ground truth: the true current, the output state, the
// largest current ever, and whether the output was ever switched off while
// current flowed (which would open an energised winding).
type fakeSupply struct {
	mu       sync.Mutex
	clk      *fakeClock
	slew     float64 // A/s
	r, l     float64 // Ω, H
	max      float64 // range, A
	target   float64
	i        float64
	at       time.Time
	on       bool
	tripped  bool
	overTemp bool
	// faults and hooks
	tripAfter  int         // trip at this many reads of the current (0: never)
	failAfter  int         // reads fail with a disconnect after this many (0: never)
	onRead     func(n int) // called at each current read with its count
	reads      int
	halts      int
	setsBefore []float64 // setpoints received before the first Halt
	peak       float64
	openedLive bool // output switched off while |I| > 10 mA
}

var _ instr.Supply = (*fakeSupply)(nil)

func newFakeSupply(clk *fakeClock) *fakeSupply {
	return &fakeSupply{clk: clk, slew: 50, r: 0.8, l: 0.05, max: 20, at: clk.Now()}
}

// update moves the true current toward the target at the slew limit.
func (f *fakeSupply) update() {
	now := f.clk.Now()
	dt := now.Sub(f.at).Seconds()
	f.at = now
	goal := f.target
	if !f.on || f.tripped {
		goal = 0
	}
	step := f.slew * dt
	switch {
	case math.Abs(goal-f.i) <= step:
		f.i = goal
	case goal > f.i:
		f.i += step
	default:
		f.i -= step
	}
	f.peak = math.Max(f.peak, math.Abs(f.i))
}

func (f *fakeSupply) truth() (i float64, on bool) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	return f.i, f.on
}

func (f *fakeSupply) Identify(context.Context) (string, error) { return "FAKE,SUPPLY", nil }
func (f *fakeSupply) Close() error                             { return nil }
func (f *fakeSupply) Limits() instr.SupplyLimits {
	return instr.SupplyLimits{MaxCurrent: units.Ampere(f.max), MaxVoltage: 60, MaxSlew: units.AmperePerSecond(f.slew)}
}

// Halt ramps to zero at the slew limit on the fake clock, then output off.
func (f *fakeSupply) Halt(ctx context.Context) error {
	f.mu.Lock()
	f.halts++
	f.update()
	f.target = 0
	i := f.i
	f.mu.Unlock()
	f.clk.advance(time.Duration(math.Abs(i) / f.slew * float64(time.Second)))
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	if math.Abs(f.i) > 0.01 {
		f.openedLive = true
	}
	f.on = false
	return nil
}

func (f *fakeSupply) SetCurrent(ctx context.Context, i units.Ampere) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	f.clk.advance(latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	if math.Abs(float64(i)) > f.max {
		return fmt.Errorf("setpoint %g A out of range", float64(i))
	}
	if f.halts == 0 {
		f.setsBefore = append(f.setsBefore, float64(i))
	}
	f.update()
	f.target = float64(i)
	return nil
}

var errDisconnected = errors.New("port disconnected")

func (f *fakeSupply) ReadCurrent(ctx context.Context) (instr.Reading, error) {
	if err := ctx.Err(); err != nil {
		return instr.Reading{}, err
	}
	at := f.clk.advance(latency)
	f.mu.Lock()
	f.reads++
	n := f.reads
	if f.tripAfter > 0 && n >= f.tripAfter {
		f.tripped, f.on = true, false
		f.i = 0 // a trip drops the current at once
	}
	fail := f.failAfter > 0 && n > f.failAfter
	f.update()
	i := f.i
	hook := f.onRead
	f.mu.Unlock()
	if hook != nil {
		hook(n)
	}
	if fail {
		return instr.Reading{}, errDisconnected
	}
	return instr.Reading{Value: i, Unit: "A", At: at, AtUncertainty: latency / 2}, nil
}

func (f *fakeSupply) ReadVoltage(ctx context.Context) (instr.Reading, error) {
	at := f.clk.advance(latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	return instr.Reading{Value: f.r * f.i, Unit: "V", At: at, AtUncertainty: latency / 2}, nil
}

func (f *fakeSupply) SetOutput(ctx context.Context, on bool) error {
	f.clk.advance(latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	if !on && math.Abs(f.i) > 0.01 {
		f.openedLive = true
	}
	f.on = on
	return nil
}

func (f *fakeSupply) Status(ctx context.Context) (instr.SupplyStatus, error) {
	if err := ctx.Err(); err != nil {
		return instr.SupplyStatus{}, err
	}
	f.clk.advance(latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	return instr.SupplyStatus{OutputOn: f.on, Tripped: f.tripped, OverTemp: f.overTemp}, nil
}

// fakeIntegrator returns ψ = k·I + drift·t from the supply's true current.
type fakeIntegrator struct {
	mu        sync.Mutex
	sup       *fakeSupply
	k         float64 // Wb-turns per A
	drift     float64 // Wb-turns/s
	zeroAt    time.Time
	offset    float64
	resets    int
	failAfter int // reads fail after this many (0: never)
	reads     int
}

var _ instr.Integrator = (*fakeIntegrator)(nil)

func (f *fakeIntegrator) Identify(context.Context) (string, error) { return "FAKE,INTEGRATOR", nil }
func (f *fakeIntegrator) Halt(context.Context) error               { return nil }
func (f *fakeIntegrator) Close() error                             { return nil }
func (f *fakeIntegrator) SetRange(context.Context, units.WeberTurn) error {
	return nil
}
func (f *fakeIntegrator) Overloaded(context.Context) (bool, error) { return false, nil }

func (f *fakeIntegrator) raw() float64 {
	i, _ := f.sup.truth()
	return f.k*i + f.drift*f.sup.clk.Now().Sub(f.zeroAt).Seconds()
}

func (f *fakeIntegrator) Reset(ctx context.Context) error {
	f.sup.clk.advance(10 * time.Millisecond)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.resets++
	f.offset = f.raw()
	return nil
}

func (f *fakeIntegrator) ReadFlux(ctx context.Context) (instr.Reading, error) {
	if err := ctx.Err(); err != nil {
		return instr.Reading{}, err
	}
	at := f.sup.clk.advance(latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.reads++
	if f.failAfter > 0 && f.reads > f.failAfter {
		return instr.Reading{}, fmt.Errorf("read FETC:FLUX?: %w", errDisconnected)
	}
	return instr.Reading{Value: f.raw() - f.offset, Unit: "Wb", At: at, AtUncertainty: latency / 2}, nil
}

// fakeProbe is a Hall probe beside a yoke gap: B = μ0·H with
// H = hSat·tanh(I/i0), not proportional to I.
type fakeProbe struct {
	sup      *fakeSupply
	hSat, i0 float64
}

var _ instr.FieldMeter = (*fakeProbe)(nil)

func (f *fakeProbe) Identify(context.Context) (string, error)    { return "FAKE,PROBE", nil }
func (f *fakeProbe) Halt(context.Context) error                  { return nil }
func (f *fakeProbe) Close() error                                { return nil }
func (f *fakeProbe) SetRange(context.Context, units.Tesla) error { return nil }
func (f *fakeProbe) Zero(context.Context) error                  { return nil }
func (f *fakeProbe) ReadField(ctx context.Context) (instr.Reading, error) {
	at := f.sup.clk.advance(latency)
	i, _ := f.sup.truth()
	return instr.Reading{Value: units.Mu0 * f.hSat * math.Tanh(i/f.i0), Unit: "T", At: at}, nil
}

// fakeThermo reads a temperature that a test may change.
type fakeThermo struct {
	clk *fakeClock
	mu  sync.Mutex
	c   float64
}

func (f *fakeThermo) Identify(context.Context) (string, error) { return "FAKE,THERMO", nil }
func (f *fakeThermo) Halt(context.Context) error               { return nil }
func (f *fakeThermo) Close() error                             { return nil }
func (f *fakeThermo) set(c float64)                            { f.mu.Lock(); f.c = c; f.mu.Unlock() }
func (f *fakeThermo) ReadTemperature(ctx context.Context) (instr.Reading, error) {
	at := f.clk.advance(latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	return instr.Reading{Value: f.c, Unit: "°C", At: at}, nil
}

// memWriter is an in-memory record.Writer.
type memWriter struct {
	mu       sync.Mutex
	runs     map[string]record.Run
	states   []record.State
	loops    []record.Loop
	events   []record.Event
	loopFail error // AddLoop returns it when set
}

var _ record.Writer = (*memWriter)(nil)

func newMemWriter() *memWriter { return &memWriter{runs: map[string]record.Run{}} }

func (w *memWriter) CreateRun(ctx context.Context, r record.Run) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if _, dup := w.runs[r.ID]; dup {
		return fmt.Errorf("run %s exists", r.ID)
	}
	w.runs[r.ID] = r
	w.states = append(w.states, r.State)
	return nil
}

func (w *memWriter) SetState(ctx context.Context, id string, s record.State, reason string, at time.Time) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	w.mu.Lock()
	defer w.mu.Unlock()
	r, ok := w.runs[id]
	if !ok {
		return record.ErrNotFound
	}
	r.State, r.Reason = s, reason
	w.runs[id] = r
	w.states = append(w.states, s)
	return nil
}

func (w *memWriter) AddLoop(ctx context.Context, l record.Loop) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.loopFail != nil {
		return w.loopFail
	}
	w.loops = append(w.loops, l)
	return nil
}

func (w *memWriter) AddEvent(ctx context.Context, e record.Event) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.events = append(w.events, e)
	return nil
}

func (w *memWriter) run(id string) record.Run {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.runs[id]
}
