package engine

import (
	"context"
	"errors"
	"log/slog"
	"math"
	"strings"
	"sync"
	"sync/atomic"
	"testing"

	"hystd/acq/config"
	"hystd/acq/config/configtest"
	"hystd/acq/engine/enginetest"
	"hystd/acq/live"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/calib/units"
	"hystd/drivers/instr"
)

type rig struct {
	clk   *enginetest.Clock
	sup   *enginetest.Supply
	integ *enginetest.Integrator
	therm *enginetest.Thermometer
	w     *enginetest.Writer
	fx    config.Fixture
	sp    config.Specimen
	mu    sync.Mutex
	evs   []live.Event
}

func newRig(t *testing.T) *rig {
	t.Helper()
	fx, sp := configtest.Ring(t)
	clk := enginetest.NewClock()
	sup := enginetest.NewSupply(clk)
	return &rig{clk: clk, sup: sup, integ: &enginetest.Integrator{Sup: sup, K: 1e-3, Drift: 1e-6, ZeroAt: clk.Now()},
		therm: &enginetest.Thermometer{Clk: clk, C: 24}, w: enginetest.NewWriter(), fx: fx, sp: sp}
}

func (r *rig) setup(t *testing.T, src string) Setup {
	t.Helper()
	rc, err := recipe.Parse("test-recipe.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	return Setup{Fixture: r.fx, Specimen: r.sp, Recipe: rc,
		Instruments: Instruments{Supply: r.sup, Integrator: r.integ, Thermometer: r.therm},
		Writer:      r.w, Clock: r.clk, SpoolDir: t.TempDir(), Log: slog.New(slog.DiscardHandler),
		Live: PublishFunc(func(e live.Event) { r.mu.Lock(); r.evs = append(r.evs, e); r.mu.Unlock() }),
		Process: func(raw []record.Sample, l recipe.LoopInfo) (Processed, error) {
			return Processed{Figures: []record.Figure{{Name: "samples", Value: float64(len(raw))}}}, nil
		}}
}

// assertSafe checks the fake supply's ground truth: at zero, output off,
// never switched off with current flowing, never beyond the fixture limit.
func (r *rig) assertSafe(t *testing.T) {
	t.Helper()
	i, on := r.sup.Truth()
	if math.Abs(i) > 1e-9 || on {
		t.Errorf("supply left at %g A, output on = %v", i, on)
	}
	if r.sup.OpenedLive {
		t.Error("output was switched off while the winding carried current")
	}
	if r.sup.Halts == 0 {
		t.Error("supply never halted")
	}
	if r.sup.Peak > r.fx.Limits.MaxCurrentA {
		t.Errorf("peak %g A beyond the fixture limit", r.sup.Peak)
	}
}

const twoLoops = `kind: recipe
name: two-loops
steps:
  - condition: {amplitude: 2 A, cycles: 1, rate: 4 A/s}
  - record_loop: {amplitude: 2 A, rate: 2 A/s, points: 100, hold: 500ms, cycles: 2}
`

func TestFinishedRun(t *testing.T) {
	r := newRig(t)
	run, err := Run(context.Background(), r.setup(t, twoLoops))
	if err != nil {
		t.Fatal(err)
	}
	r.assertSafe(t)
	if run.State != record.Finished || run.Reason != "" {
		t.Errorf("run %s %q", run.State, run.Reason)
	}
	if got := r.w.States; len(got) != 3 || got[0] != record.Queued || got[1] != record.Running || got[2] != record.Finished {
		t.Errorf("states %v, want queued running finished", got)
	}
	if len(r.w.Loops) != 2 {
		t.Fatalf("%d loops stored, want 2", len(r.w.Loops))
	}
	for k, l := range r.w.Loops {
		if l.N != k+1 || l.Kind != "loop" || l.Amplitude != 2 || l.AmpUnit != "A" || len(l.Figures) != 1 {
			t.Errorf("loop %d: %+v", k, l.Figures)
		}
		// pre hold, then the sweep, then the post hold, in time order
		order := map[record.Phase]int{record.PreHold: 0, record.Sweep: 1, record.PostHold: 2}
		last, count := 0, map[record.Phase]int{}
		for j, s := range l.Raw {
			if order[s.Phase] < last {
				t.Fatalf("loop %d sample %d: phase %s after a later phase", l.N, j, s.Phase)
			}
			last = order[s.Phase]
			count[s.Phase]++
			if j > 0 && s.T <= l.Raw[j-1].T {
				t.Fatalf("loop %d: time stamps not increasing at %d", l.N, j)
			}
		}
		// 8 s sweep sampled every 80 ms (points per 4 A of travel... 100 per sweep)
		if count[record.Sweep] < 95 || count[record.Sweep] > 105 || count[record.PreHold] < 5 || count[record.PostHold] < 5 {
			t.Errorf("loop %d phase counts %v", l.N, count)
		}
		// The integrator was zeroed at the tip: the first pre-hold sample is near 0.
		if p := l.Raw[0].Psi; math.Abs(p) > 1e-5 {
			t.Errorf("loop %d starts at ψ = %g, integrator not reset at the pre hold", l.N, p)
		}
		// The commanded sweep reaches both tips exactly. The current read
		// back follows the setpoint within one point's step (8 A of travel
		// over 100 points is 0.08 A): the fake supply slews at 50 A/s, so it
		// covers a step in 1.6 ms, but a read may land a few 0.5 ms query
		// latencies after the set, depending on which concurrent read the
		// clock serves first.
		lo, hi := 0.0, 0.0
		for j, s := range l.Raw {
			lo, hi = math.Min(lo, s.Setpoint), math.Max(hi, s.Setpoint)
			if math.Abs(s.I-s.Setpoint) > 0.08 {
				t.Errorf("loop %d sample %d: read back %g A against the setpoint %g A", l.N, j, s.I, s.Setpoint)
			}
		}
		if math.Abs(lo+2) > 1e-9 || math.Abs(hi-2) > 1e-9 {
			t.Errorf("loop %d commands %g..%g A, want ±2", l.N, lo, hi)
		}
	}
	if r.integ.Resets != 2 {
		t.Errorf("%d integrator resets, want 2", r.integ.Resets)
	}
	var caution, progress bool
	for _, e := range r.w.Events {
		caution = caution || strings.Contains(e.Text, "½·L·I²") && strings.Contains(e.Text, "licensed practice")
	}
	for _, e := range r.evs {
		progress = progress || e.Kind == live.KindProgress && e.Fraction > 0.5
	}
	if !caution {
		t.Error("no safety caution recorded at the start")
	}
	if !progress {
		t.Error("no progress published")
	}
}

func TestEndings(t *testing.T) {
	tests := []struct {
		name   string
		arm    func(r *rig, cancel context.CancelCauseFunc)
		state  record.State
		reason string
		loops  int // loops stored
	}{
		{"abort mid-loop", func(r *rig, cancel context.CancelCauseFunc) {
			r.sup.OnRead = func(int) {
				if r.w.LoopCount() == 1 && r.integ.Resets == 2 {
					cancel(Abort("aborted by operator"))
				}
			}
		}, record.Aborted, "aborted by operator", 1},
		{"SIGTERM mid-loop", func(r *rig, cancel context.CancelCauseFunc) {
			r.sup.OnRead = func(n int) {
				if r.integ.Resets == 1 {
					cancel(Abort("daemon stopping: terminated"))
				}
			}
		}, record.Aborted, "daemon stopping: terminated", 0},
		{"plain cancel", func(r *rig, cancel context.CancelCauseFunc) {
			r.sup.OnRead = func(n int) {
				if n == 50 {
					cancel(nil)
				}
			}
		}, record.Aborted, "cancelled: context canceled", 0},
		{"supply trip", func(r *rig, _ context.CancelCauseFunc) { r.sup.TripAfter = 200 }, record.Failed, "supply tripped", 1},
		{"integrator port hung up", func(r *rig, _ context.CancelCauseFunc) { r.integ.FailAfter = 300 },
			record.Failed, "lost communication with the integrator: read flux: read FETC:FLUX?: port disconnected", 1},
		{"supply port hung up", func(r *rig, _ context.CancelCauseFunc) { r.sup.FailAfter = 150 },
			record.Failed, "lost communication with the supply: read current: port disconnected", 0},
		{"winding too hot", func(r *rig, _ context.CancelCauseFunc) {
			r.sup.OnRead = func(n int) {
				if n == 120 {
					r.therm.Set(81)
				}
			}
		}, record.Failed, "winding temperature 81 °C crossed the fixture limit limits.max_winding_temp_c = 80 °C", 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := newRig(t)
			ctx, cancel := context.WithCancelCause(context.Background())
			defer cancel(nil)
			s := r.setup(t, twoLoops)
			tc.arm(r, cancel)
			if r.sup.FailAfter > 0 { // a hung-up port heals for the halt, as a reconnect does
				n := r.sup.FailAfter
				prev := r.sup.OnRead
				r.sup.OnRead = func(k int) {
					if prev != nil {
						prev(k)
					}
					if k > n {
						r.sup.FailAfter = 0
					}
				}
			}
			run, err := Run(ctx, s)
			var stop *Stop
			if !errors.As(err, &stop) {
				t.Fatalf("error %v, want a *Stop", err)
			}
			r.assertSafe(t)
			got := r.w.Run(run.ID)
			if got.State != tc.state || !strings.Contains(got.Reason, tc.reason) {
				t.Errorf("recorded %s %q, want %s %q", got.State, got.Reason, tc.state, tc.reason)
			}
			if run.State != got.State || stop.State != got.State {
				t.Errorf("returned %s / %s, recorded %s", run.State, stop.State, got.State)
			}
			if n := r.w.LoopCount(); n != tc.loops {
				t.Errorf("%d loops stored, want %d", n, tc.loops)
			}
		})
	}
}

// TestStartupFindsSupplyOn: a supply left energised is brought to zero
// before the run sends any setpoint.
func TestStartupFindsSupplyOn(t *testing.T) {
	r := newRig(t)
	r.sup.Energise(3)
	if _, err := Run(context.Background(), r.setup(t, twoLoops)); err != nil {
		t.Fatal(err)
	}
	r.assertSafe(t)
	// The supply's own Halt (which ramps at its slew limit and waits for
	// zero) is the first thing it is told: no setpoint is sent before it.
	if len(r.sup.SetsBefore) != 0 || r.sup.Halts == 0 {
		t.Fatalf("setpoints %v sent before the first of %d halts", r.sup.SetsBefore, r.sup.Halts)
	}
	found := false
	for _, e := range r.w.Events {
		found = found || strings.Contains(e.Text, "found with its output on")
	}
	if !found {
		t.Error("no event says the supply was found on")
	}
}

func TestRefused(t *testing.T) {
	tests := []struct{ name, steps, want string }{
		{"fixture limit", "  - record_loop: {amplitude: 15 A, rate: 5 A/s, points: 100}\n", "limits.max_current_a = 10 A"},
		{"supply range", "  - record_loop: {amplitude: 8 A, rate: 5 A/s, points: 100}\n", "beyond the supply's range of 5 A"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := newRig(t)
			r.sup.Max = 5
			_, err := Run(context.Background(), r.setup(t, "kind: recipe\nname: big\nsteps:\n"+tc.steps))
			var ref *Refused
			if !errors.As(err, &ref) || !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), "steps.0.record_loop") {
				t.Fatalf("error %v, want a refusal naming steps.0.record_loop and %q", err, tc.want)
			}
			if len(r.w.RunList()) != 0 || r.sup.Reads != 0 {
				t.Error("a refused recipe touched the store or the supply")
			}
		})
	}
}

// TestStoreDown: loops the store refuses are spooled to disk, read back
// intact, and the run says where they are.
func TestStoreDown(t *testing.T) {
	r := newRig(t)
	r.w.LoopFail = errors.New("database is locked")
	s := r.setup(t, twoLoops)
	run, err := Run(context.Background(), s)
	if err == nil || run.State != record.Failed {
		t.Fatalf("run %s, err %v", run.State, err)
	}
	r.assertSafe(t)
	if !strings.Contains(run.Reason, "loop 2 not committed (database is locked): kept in ") {
		t.Fatalf("reason %q", run.Reason)
	}
	file := run.Reason[strings.LastIndex(run.Reason, "kept in ")+len("kept in "):]
	l, err := ReadSpool(file)
	if err != nil {
		t.Fatal(err)
	}
	if l.N != 2 || l.RunID != run.ID || len(l.Raw) < 100 || !math.IsNaN(l.Raw[0].BProbe) {
		t.Errorf("spooled loop %d of %s with %d samples, BProbe %g", l.N, l.RunID, len(l.Raw), l.Raw[0].BProbe)
	}
}

// TestFieldControl: on a yoke whose H = 500 kA/m·tanh(I/10 A) is not
// proportional to I, the closed loop keeps the measured H on the setpoint.
func TestFieldControl(t *testing.T) {
	r := newRig(t)
	fx, err := config.LoadFixture("../recipe/testdata/fixture-yoke.yaml")
	if err != nil {
		t.Fatal(err)
	}
	sp, err := config.LoadSpecimen("../recipe/testdata/specimen-magnet.yaml")
	if err != nil {
		t.Fatal(err)
	}
	r.fx, r.sp = fx, sp
	probe := &enginetest.Probe{Sup: r.sup, HSat: 500e3, I0: 10}
	s := r.setup(t, `kind: recipe
name: yoke-loop
control: field
field_gain_a_per_a_m: 2.0e-5
steps:
  - record_loop: {amplitude: 150 kA/m, rate: 20 kA/m/s, points: 300, hold: 500ms}
`)
	s.Instruments.FieldMeter = probe
	s.Instruments.Thermometer = nil
	if _, err := Run(context.Background(), s); err != nil {
		t.Fatal(err)
	}
	r.assertSafe(t)
	if len(r.w.Loops) != 1 {
		t.Fatalf("%d loops", len(r.w.Loops))
	}
	worst, sum, n := 0.0, 0.0, 0.0
	for _, smp := range r.w.Loops[0].Raw {
		if smp.Phase != record.Sweep {
			continue
		}
		h := smp.BProbe / units.Mu0
		worst = math.Max(worst, math.Abs(h-smp.Setpoint))
		sum += math.Abs(h - smp.Setpoint)
		n++
	}
	// The probe is read concurrently with the supply's setting, so a reading
	// lags its setpoint by up to one period: 2 kA/m at 20 kA/m/s and 100 ms.
	// At the reversals the supply's own slew adds up to one more period.
	if worst > 6e3 || sum/n > 2.5e3 {
		t.Errorf("measured H strays up to %.0f A/m (mean %.0f A/m) from the setpoint", worst, sum/n)
	}
}

// setWatch is a supply that remembers the last setpoint whose setting
// completed, and fluxOfSet an integrator whose "flux" is that setpoint at
// the moment it is read: a sample whose channels were read after its own
// setting has Psi equal to its Setpoint.
type setWatch struct {
	*enginetest.Supply
	last atomic.Uint64 // math.Float64bits of the last completed setpoint
}

func (s *setWatch) SetCurrent(ctx context.Context, i units.Ampere) error {
	err := s.Supply.SetCurrent(ctx, i)
	if err == nil {
		s.last.Store(math.Float64bits(float64(i)))
	}
	return err
}

type fluxOfSet struct {
	*enginetest.Integrator
	sup *setWatch
}

func (f fluxOfSet) ReadFlux(ctx context.Context) (instr.Reading, error) {
	r, err := f.Integrator.ReadFlux(ctx)
	r.Value = math.Float64frombits(f.sup.last.Load())
	return r, err
}

// TestSetThenRead: within a tick the setting completes before any channel
// is read, so every recorded sample's flux was read under its own setpoint
// (current control: the setpoint is the current set); and every sample
// keeps its current reading's offset from the flux reading's time.
func TestSetThenRead(t *testing.T) {
	r := newRig(t)
	sw := &setWatch{Supply: r.sup}
	s := r.setup(t, twoLoops)
	s.Instruments.Supply = sw
	s.Instruments.Integrator = fluxOfSet{Integrator: r.integ, sup: sw}
	if _, err := Run(context.Background(), s); err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, l := range r.w.Loops {
		for j, smp := range l.Raw {
			n++
			if smp.Psi != smp.Setpoint {
				t.Fatalf("loop %d sample %d: flux read under setpoint %g, the sample's is %g", l.N, j, smp.Psi, smp.Setpoint)
			}
		}
	}
	if n == 0 {
		t.Fatal("no samples recorded")
	}
}
