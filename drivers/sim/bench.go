package sim

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"sync"
	"time"

	"hystd/calib/units"
	"hystd/drivers/clock"
	"hystd/drivers/sim/physics"
)

const (
	defaultStep = time.Millisecond
	maxStep     = 10 * time.Millisecond
	tickPeriod  = 10 * time.Millisecond // real-time advance of physics and timed faults
)

// Truth is the true state of the bench's fixture and specimen at time T
// since Start, in SI units.
type Truth struct {
	T          time.Duration
	Setpoint   units.Ampere
	I          units.Ampere // winding current
	V          units.Volt   // supply terminal voltage
	Resistance float64      // Ω, winding resistance at its temperature
	Temp       units.Celsius
	H          units.AmperePerMetre // applied field N1·I/l_m
	HCore      units.AmperePerMetre // field in the material (H less the eddy-current field)
	M          units.AmperePerMetre
	B          units.Tesla     // μ0·(HCore + M)
	J          units.Tesla     // μ0·M
	Psi        units.WeberTurn // true search-coil linkage, without integrator errors
	Output     bool
	Compliance bool
	OverTemp   bool
	Tripped    bool
}

// Option changes how Start runs a bench.
type Option func(*Bench)

// WithClock makes the bench follow c instead of the wall clock. With a
// *clock.Sim the bench is simulated time's partner: time moves only while
// no command line is waiting on any of its pseudo-terminals and none is
// being answered, and a delayed reply waits in simulated time.
func WithClock(c clock.Clock) Option { return func(b *Bench) { b.clock = c } }

// Bench is a running simulated bench. Its methods are safe for concurrent
// use. Close (or cancelling Start's context) stops it and removes the ports.
type Bench struct {
	cfg   Config
	clock clock.Clock
	start time.Time

	mu     sync.Mutex
	rig    *physics.Rig
	simT   time.Duration
	hist   []Truth
	head   int // next write index once hist is full
	insts  map[string]*instrument
	faults []*faultState
	// injected counts fired faults by kind.
	injected map[string]int
	// destroyed are the messages of error-queue entries whose reply a
	// reply fault spoiled beyond reading (DestroyedErrors).
	destroyed []string

	cancel    context.CancelFunc
	unquiet   func() // unregisters quiet from a *clock.Sim
	wg        sync.WaitGroup
	closeOnce sync.Once
	closeErr  error
}

// Start builds the physics of cfg (from LoadBench, ParseBench or
// DefaultBench), opens one pseudo-terminal per instrument and serves them
// until ctx is cancelled or Close is called.
func Start(ctx context.Context, cfg Config, opts ...Option) (*Bench, error) {
	if cfg.profiles == nil {
		return nil, errors.New("sim: config was not loaded with LoadBench, ParseBench or DefaultBench")
	}
	rig, err := physics.NewRig(cfg.RigParams)
	if err != nil {
		return nil, fmt.Errorf("sim: %w", err)
	}
	b := &Bench{cfg: cfg, clock: clock.Real{}, rig: rig, insts: map[string]*instrument{}}
	for _, o := range opts {
		o(b)
	}
	b.start = b.clock.Now()
	for i, f := range cfg.Faults {
		b.faults = append(b.faults, &faultState{Fault: f, rng: rand.New(rand.NewPCG(cfg.Seed, uint64(i)+1))})
	}
	serial := 1
	for _, role := range sortedKeys(cfg.profiles) {
		p, err := openPty()
		if err != nil {
			for _, in := range b.insts {
				in.pty.closeMaster()
				in.pty.closeSlave()
			}
			return nil, fmt.Errorf("sim: %s: %w", role, err)
		}
		in := newInstrument(role, cfg.profiles[role], p, serial)
		// Each role draws its noise from its own stream, so that the
		// order in which concurrent reads reach the bench changes nothing.
		in.noise = rand.New(rand.NewPCG(cfg.Seed, 0x6e6f697365^uint64(serial)<<32))
		b.insts[role] = in
		serial++
	}
	ctx, b.cancel = context.WithCancel(ctx)
	for _, in := range b.insts {
		b.wg.Add(1)
		go func() { defer b.wg.Done(); b.serve(ctx, in) }()
	}
	if sc, ok := b.clock.(*clock.Sim); ok {
		b.unquiet = sc.AddQuiet(b.quiet)
	} else {
		b.wg.Add(1)
		go func() { defer b.wg.Done(); b.tick(ctx) }()
	}
	go func() { <-ctx.Done(); b.Close() }()
	b.mu.Lock()
	b.record()
	b.mu.Unlock()
	return b, nil
}

// Ports returns the slave device path of each served role (role →
// "/dev/pts/N"): put these into a fixture's instruments.<role>.port.
func (b *Bench) Ports() map[string]string {
	out := map[string]string{}
	for r, in := range b.insts {
		out[r] = in.pty.path
	}
	return out
}

// Profiles returns the profile name served on each role.
func (b *Bench) Profiles() map[string]string { return b.cfg.Profiles() }

// Config returns the bench's configuration.
func (b *Bench) Config() Config { return b.cfg }

// Truth advances the physics to the clock's present and returns the true
// state. It never goes through the ports.
func (b *Bench) Truth() Truth {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.advance()
	return b.truth()
}

// History returns the truth of every physics step still kept (Config.History
// at most), oldest first.
func (b *Bench) History() []Truth {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.advance()
	out := make([]Truth, 0, len(b.hist))
	out = append(out, b.hist[b.head:]...)
	return append(out, b.hist[:b.head]...)
}

// Close stops serving and closes the pseudo-terminals; clients then see the
// port as gone. It is safe to call more than once.
func (b *Bench) Close() error {
	b.closeOnce.Do(func() {
		b.cancel()
		if b.unquiet != nil {
			b.unquiet()
		}
		var errs []error
		for _, in := range b.insts {
			if err := in.pty.closeMaster(); err != nil {
				errs = append(errs, err)
			}
		}
		b.wg.Wait()
		for _, in := range b.insts {
			in.pty.closeSlave()
		}
		b.closeErr = errors.Join(errs...)
	})
	return b.closeErr
}

// quiet reports whether the bench has nothing left to do at the present
// instant: no command line unread on any master, none being executed or
// answered. Bytes the bench wrote and nobody read yet do not count (a late
// reply nobody waits for must not stop time), nor do lines written to an
// instrument that holds a delayed reply (it reads them once the reply is
// out, when the clock has reached its time). A *clock.Sim calls it before
// moving time.
func (b *Bench) quiet() bool {
	for _, in := range b.insts {
		b.mu.Lock()
		busy, holding := in.busy, in.holding
		b.mu.Unlock()
		if busy || (!holding && in.pty.unread() > 0) {
			return false
		}
	}
	return true
}

// tick advances physics and timed faults in real time, so a trip or a timed
// fault happens on time even when nobody talks to the bench. (In simulated
// time nothing is needed: time moves only when the bench is asked to.)
func (b *Bench) tick(ctx context.Context) {
	t := time.NewTicker(tickPeriod)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			b.mu.Lock()
			b.advance()
			b.mu.Unlock()
		}
	}
}

// advance steps the physics up to the clock's present; b.mu is held.
func (b *Bench) advance() {
	target := b.clock.Now().Sub(b.start)
	step := b.cfg.Step.D()
	for b.simT+step <= target {
		b.rig.Step(step.Seconds())
		b.simT += step
		b.record()
		b.sampleBuffers()
		b.timedFaults()
	}
}

func (b *Bench) record() {
	t := b.truth()
	if len(b.hist) < b.cfg.History {
		b.hist = append(b.hist, t)
		return
	}
	b.hist[b.head] = t
	b.head = (b.head + 1) % len(b.hist)
}

func (b *Bench) truth() Truth {
	s := b.rig.State()
	return Truth{
		T: b.simT, Setpoint: units.Ampere(s.Setpoint), I: units.Ampere(s.I), V: units.Volt(s.V),
		Resistance: s.R, Temp: units.Celsius(s.TempC),
		H: units.AmperePerMetre(s.H), HCore: units.AmperePerMetre(s.HCore), M: units.AmperePerMetre(s.M),
		B: units.Tesla(s.B), J: units.Tesla(s.J), Psi: units.WeberTurn(s.Psi),
		Output: s.Output, Compliance: s.Compl, OverTemp: s.OverTemp, Tripped: s.Tripped,
	}
}
