// Package enginetest holds in-memory fakes for testing code that drives the
// engine: a clock that advances only when waited on or when an instrument
// answers, a slewing supply that keeps its ground truth, an integrator, a
// Hall probe, a thermometer and a record.Writer. Nothing sleeps. The fakes
// are safe for concurrent use (the engine reads instruments concurrently).
package enginetest

import (
	"context"
	"fmt"
	"math"
	"sync"
	"time"

	"hystd/acq/record"
	"hystd/acq/store/memstore"
	"hystd/calib/units"
	"hystd/drivers/clock"
	"hystd/drivers/instr"
	"hystd/drivers/link"
)

// Clock advances only when the engine waits or an instrument answers:
// time is injected, nothing sleeps. It is drivers/clock's Manual clock.
type Clock = clock.Manual

// NewClock returns a clock at 2026-03-02 07:30 UTC.
func NewClock() *Clock { return clock.NewManual(time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC)) }

// Latency is what each fake query takes on the fake clock.
const Latency = 500 * time.Microsecond

// Supply is a bipolar supply with a slew limit driving an R–L winding.
// It keeps the ground truth: the true current, the output state, the
// largest current ever, and whether the output was ever switched off while
// current flowed (which would open an energised winding). Set the exported
// fields before the engine runs; read them after it returned.
type Supply struct {
	mu       sync.Mutex
	clk      *Clock
	Slew     float64 // A/s
	r, l     float64 // Ω, H
	Max      float64 // range, A
	Target   float64
	i        float64
	at       time.Time
	On       bool
	Tripped  bool
	OverTemp bool
	// faults and hooks
	TripAfter  int         // trip at this many reads of the current (0: never)
	FailAfter  int         // reads fail with a disconnect after this many (0: never)
	OnRead     func(n int) // called at each current read with its count
	Reads      int
	Halts      int
	SetsBefore []float64 // setpoints received before the first Halt
	Peak       float64
	OpenedLive bool // output switched off while |I| > 10 mA
}

var _ instr.Supply = (*Supply)(nil)

// NewSupply returns a supply of ±20 A slewing at 50 A/s into 0.8 Ω, 50 mH.
func NewSupply(clk *Clock) *Supply {
	return &Supply{clk: clk, Slew: 50, r: 0.8, l: 0.05, Max: 20, at: clk.Now()}
}

// update moves the true current toward the target at the slew limit.
func (f *Supply) update() {
	now := f.clk.Now()
	dt := now.Sub(f.at).Seconds()
	f.at = now
	goal := f.Target
	if !f.On || f.Tripped {
		goal = 0
	}
	step := f.Slew * dt
	switch {
	case math.Abs(goal-f.i) <= step:
		f.i = goal
	case goal > f.i:
		f.i += step
	default:
		f.i -= step
	}
	f.Peak = math.Max(f.Peak, math.Abs(f.i))
}

// Energise puts the supply at i amperes with its output on, as if a
// previous program had left it so.
func (f *Supply) Energise(i float64) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.On, f.Target, f.i = true, i, i
}

// Truth returns the true current and output state now.
func (f *Supply) Truth() (i float64, on bool) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	return f.i, f.On
}

// Identify returns a fixed identity.
func (f *Supply) Identify(context.Context) (string, error) { return "FAKE,SUPPLY", nil }

// Close does nothing.
func (f *Supply) Close() error { return nil }

// Limits returns the range and slew.
func (f *Supply) Limits() instr.SupplyLimits {
	return instr.SupplyLimits{MaxCurrent: units.Ampere(f.Max), MaxVoltage: 60, MaxSlew: units.AmperePerSecond(f.Slew)}
}

// Halt ramps to zero at the slew limit on the fake clock, then turns the output off.
func (f *Supply) Halt(ctx context.Context) error {
	f.mu.Lock()
	f.Halts++
	f.update()
	f.Target = 0
	i := f.i
	f.mu.Unlock()
	f.clk.Advance(time.Duration(math.Abs(i) / f.Slew * float64(time.Second)))
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	if math.Abs(f.i) > 0.01 {
		f.OpenedLive = true
	}
	f.On = false
	return nil
}

// SetCurrent sets the target current.
func (f *Supply) SetCurrent(ctx context.Context, i units.Ampere) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	f.clk.Advance(Latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	if math.Abs(float64(i)) > f.Max {
		return fmt.Errorf("setpoint %g A out of range", float64(i))
	}
	if f.Halts == 0 {
		f.SetsBefore = append(f.SetsBefore, float64(i))
	}
	f.update()
	f.Target = float64(i)
	return nil
}

// ErrDisconnected is what a fake port returns after its FailAfter: a
// disconnect as the link layer reports it.
var ErrDisconnected = link.ErrDisconnected

// ReadCurrent reads the true current.
func (f *Supply) ReadCurrent(ctx context.Context) (instr.Reading, error) {
	if err := ctx.Err(); err != nil {
		return instr.Reading{}, err
	}
	at := f.clk.Advance(Latency)
	f.mu.Lock()
	f.Reads++
	n := f.Reads
	if f.TripAfter > 0 && n >= f.TripAfter {
		f.Tripped, f.On = true, false
		f.i = 0 // a trip drops the current at once
	}
	fail := f.FailAfter > 0 && n > f.FailAfter
	f.update()
	i := f.i
	hook := f.OnRead
	f.mu.Unlock()
	if hook != nil {
		hook(n)
	}
	if fail {
		return instr.Reading{}, ErrDisconnected
	}
	return instr.Reading{Value: i, Unit: "A", At: at, AtUncertainty: Latency / 2}, nil
}

// ReadVoltage reads R·I.
func (f *Supply) ReadVoltage(ctx context.Context) (instr.Reading, error) {
	at := f.clk.Advance(Latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	return instr.Reading{Value: f.r * f.i, Unit: "V", At: at, AtUncertainty: Latency / 2}, nil
}

// SetOutput switches the output.
func (f *Supply) SetOutput(ctx context.Context, on bool) error {
	f.clk.Advance(Latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.update()
	if !on && math.Abs(f.i) > 0.01 {
		f.OpenedLive = true
	}
	f.On = on
	return nil
}

// Status reports output, trip and over-temperature.
func (f *Supply) Status(ctx context.Context) (instr.SupplyStatus, error) {
	if err := ctx.Err(); err != nil {
		return instr.SupplyStatus{}, err
	}
	f.clk.Advance(Latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	return instr.SupplyStatus{OutputOn: f.On, Tripped: f.Tripped, OverTemp: f.OverTemp}, nil
}

// Integrator returns ψ = K·I + Drift·t from the supply's true current.
type Integrator struct {
	mu        sync.Mutex
	Sup       *Supply
	K         float64 // Wb-turns per A
	Drift     float64 // Wb-turns/s
	ZeroAt    time.Time
	offset    float64
	Resets    int
	FailAfter int // reads fail after this many (0: never)
	Reads     int
}

var _ instr.Integrator = (*Integrator)(nil)

// Identify returns a fixed identity.
func (f *Integrator) Identify(context.Context) (string, error) { return "FAKE,INTEGRATOR", nil }

// Halt does nothing.
func (f *Integrator) Halt(context.Context) error { return nil }

// Close does nothing.
func (f *Integrator) Close() error { return nil }

// SetRange does nothing.
func (f *Integrator) SetRange(context.Context, units.WeberTurn) error {
	return nil
}

// Overloaded is always false.
func (f *Integrator) Overloaded(context.Context) (bool, error) { return false, nil }

func (f *Integrator) raw() float64 {
	i, _ := f.Sup.Truth()
	return f.K*i + f.Drift*f.Sup.clk.Now().Sub(f.ZeroAt).Seconds()
}

// Reset zeroes the flux.
func (f *Integrator) Reset(ctx context.Context) error {
	f.Sup.clk.Advance(10 * time.Millisecond)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.Resets++
	f.offset = f.raw()
	return nil
}

// ReadFlux reads ψ.
func (f *Integrator) ReadFlux(ctx context.Context) (instr.Reading, error) {
	if err := ctx.Err(); err != nil {
		return instr.Reading{}, err
	}
	at := f.Sup.clk.Advance(Latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	f.Reads++
	if f.FailAfter > 0 && f.Reads > f.FailAfter {
		return instr.Reading{}, fmt.Errorf("read FETC:FLUX?: %w", ErrDisconnected)
	}
	return instr.Reading{Value: f.raw() - f.offset, Unit: "Wb", At: at, AtUncertainty: Latency / 2}, nil
}

// Probe is a Hall probe beside a yoke gap: B = μ0·H with
// H = HSat·tanh(I/I0), not proportional to I.
type Probe struct {
	Sup      *Supply
	HSat, I0 float64 // A/m, A
}

var _ instr.FieldMeter = (*Probe)(nil)

// Identify returns a fixed identity.
func (f *Probe) Identify(context.Context) (string, error) { return "FAKE,PROBE", nil }

// Halt does nothing.
func (f *Probe) Halt(context.Context) error { return nil }

// Close does nothing.
func (f *Probe) Close() error { return nil }

// SetRange does nothing.
func (f *Probe) SetRange(context.Context, units.Tesla) error { return nil }

// Zero does nothing.
func (f *Probe) Zero(context.Context) error { return nil }

// ReadField reads μ0·H.
func (f *Probe) ReadField(ctx context.Context) (instr.Reading, error) {
	at := f.Sup.clk.Advance(Latency)
	i, _ := f.Sup.Truth()
	return instr.Reading{Value: units.Mu0 * f.HSat * math.Tanh(i/f.I0), Unit: "T", At: at}, nil
}

// Thermometer reads a temperature that a test may change.
type Thermometer struct {
	Clk *Clock
	mu  sync.Mutex
	C   float64 // °C
}

// Identify returns a fixed identity.
func (f *Thermometer) Identify(context.Context) (string, error) { return "FAKE,THERMO", nil }

// Halt does nothing.
func (f *Thermometer) Halt(context.Context) error { return nil }

// Close does nothing.
func (f *Thermometer) Close() error { return nil }

// Set changes the temperature read.
func (f *Thermometer) Set(c float64) { f.mu.Lock(); f.C = c; f.mu.Unlock() }

// ReadTemperature reads the set temperature.
func (f *Thermometer) ReadTemperature(ctx context.Context) (instr.Reading, error) {
	at := f.Clk.Advance(Latency)
	f.mu.Lock()
	defer f.mu.Unlock()
	return instr.Reading{Value: f.C, Unit: "°C", At: at}, nil
}

// Writer is the record.Writer of the engine tests: it stores in a memstore
// (the one in-memory store, held to the shared suite acq/store/storetest),
// so the engine is held to the store's contract, and records what it was
// given — every state in order, the loops and events as written — with
// an injected AddLoop failure.
type Writer struct {
	st       *memstore.Store
	mu       sync.Mutex
	States   []record.State // the state of each CreateRun and SetState, in order
	Loops    []record.Loop  // as written, in order
	Events   []record.Event // as written, in order
	LoopFail error          // AddLoop returns it when set
}

var _ record.Writer = (*Writer)(nil)

// NewWriter returns an empty Writer.
func NewWriter() *Writer { return &Writer{st: memstore.New(nil)} }

// CreateRun stores a new run.
func (w *Writer) CreateRun(ctx context.Context, r record.Run) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if err := w.st.CreateRun(ctx, r); err != nil {
		return err
	}
	w.States = append(w.States, w.Run(r.ID).State)
	return nil
}

// SetState changes a run state.
func (w *Writer) SetState(ctx context.Context, id string, s record.State, reason string, at time.Time) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	w.mu.Lock()
	defer w.mu.Unlock()
	if err := w.st.SetState(ctx, id, s, reason, at); err != nil {
		return err
	}
	w.States = append(w.States, s)
	return nil
}

// AddLoop stores the loop, or returns LoopFail.
func (w *Writer) AddLoop(ctx context.Context, l record.Loop) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.LoopFail != nil {
		return w.LoopFail
	}
	if err := w.st.AddLoop(ctx, l); err != nil {
		return err
	}
	w.Loops = append(w.Loops, l)
	return nil
}

// AddEvent stores the event.
func (w *Writer) AddEvent(ctx context.Context, e record.Event) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if err := w.st.AddEvent(ctx, e); err != nil {
		return err
	}
	w.Events = append(w.Events, e)
	return nil
}

// RunList returns the stored runs, newest first.
func (w *Writer) RunList() []record.Run {
	runs, _ := w.st.Runs(context.Background(), record.RunFilter{Limit: math.MaxInt})
	return runs
}

// LoopCount returns the number of loops added.
func (w *Writer) LoopCount() int {
	w.mu.Lock()
	defer w.mu.Unlock()
	return len(w.Loops)
}

// Run returns the stored run id (the zero Run if there is none).
func (w *Writer) Run(id string) record.Run {
	r, _ := w.st.Run(context.Background(), id)
	return r
}

// EventsOf returns the events stored for run id, in order.
func (w *Writer) EventsOf(id string) []record.Event {
	w.mu.Lock()
	defer w.mu.Unlock()
	var out []record.Event
	for _, e := range w.Events {
		if e.RunID == id {
			out = append(out, e)
		}
	}
	return out
}
