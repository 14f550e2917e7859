package sampler

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"hystd/calib/units"
	"hystd/drivers/instr"
	"hystd/drivers/link"
)

var t0 = time.Unix(1_000, 0)

// fake is every role at once; each read returns a fixed value stamped at a
// fixed time, optionally after waiting at a barrier shared by all fakes.
type fake struct {
	value   float64
	at      time.Duration // since t0
	unc     time.Duration
	err     error
	barrier *barrier
}

func (f *fake) reading(ctx context.Context) (instr.Reading, error) {
	if f.barrier != nil {
		if err := f.barrier.wait(ctx); err != nil {
			return instr.Reading{}, err
		}
	}
	if f.err != nil {
		return instr.Reading{}, f.err
	}
	return instr.Reading{Value: f.value, At: t0.Add(f.at), AtUncertainty: f.unc}, nil
}

func (f *fake) Identify(context.Context) (string, error)               { return "fake", nil }
func (f *fake) Halt(context.Context) error                             { return nil }
func (f *fake) Close() error                                           { return nil }
func (f *fake) SetCurrent(context.Context, units.Ampere) error         { return nil }
func (f *fake) ReadCurrent(ctx context.Context) (instr.Reading, error) { return f.reading(ctx) }
func (f *fake) ReadVoltage(ctx context.Context) (instr.Reading, error) {
	r, err := f.reading(ctx)
	r.Value *= 2
	return r, err
}
func (f *fake) SetOutput(context.Context, bool) error                      { return nil }
func (f *fake) Status(context.Context) (instr.SupplyStatus, error)         { return instr.SupplyStatus{}, nil }
func (f *fake) Limits() instr.SupplyLimits                                 { return instr.SupplyLimits{} }
func (f *fake) Reset(context.Context) error                                { return nil }
func (f *fake) SetRange(context.Context, units.WeberTurn) error            { return nil }
func (f *fake) ReadFlux(ctx context.Context) (instr.Reading, error)        { return f.reading(ctx) }
func (f *fake) Overloaded(context.Context) (bool, error)                   { return false, nil }
func (f *fake) ReadField(ctx context.Context) (instr.Reading, error)       { return f.reading(ctx) }
func (f *fake) Zero(context.Context) error                                 { return nil }
func (f *fake) ReadTemperature(ctx context.Context) (instr.Reading, error) { return f.reading(ctx) }

type fieldFake struct{ *fake }

func (f fieldFake) SetRange(context.Context, units.Tesla) error { return nil }

// barrier releases its waiters once n of them arrived; a sequential reader
// would never get there.
type barrier struct {
	mu   sync.Mutex
	n    int
	gate chan struct{}
}

func newBarrier(n int) *barrier { return &barrier{n: n, gate: make(chan struct{})} }

func (b *barrier) wait(ctx context.Context) error {
	b.mu.Lock()
	b.n--
	if b.n == 0 {
		close(b.gate)
	}
	b.mu.Unlock()
	select {
	case <-b.gate:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

func TestReadIsConcurrent(t *testing.T) {
	b := newBarrier(4) // supply (first read), integrator, field meter, thermometer
	s, err := New(Roles{
		Supply:      &fake{value: 1.5, at: 10 * time.Millisecond, unc: time.Millisecond, barrier: b},
		Integrator:  &fake{value: 2e-4, at: 10 * time.Millisecond, unc: time.Millisecond, barrier: b},
		FieldMeter:  fieldFake{&fake{value: 0.1, at: 10 * time.Millisecond, unc: time.Millisecond, barrier: b}},
		Thermometer: &fake{value: 23, at: 10 * time.Millisecond, unc: time.Millisecond, barrier: b},
	}, t0)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	got, err := s.Read(ctx)
	if err != nil {
		t.Fatalf("the channels were not read at once: %v", err)
	}
	if got.I != 1.5 || got.V != 3 || got.Psi != 2e-4 || got.BProbe != 0.1 || got.TempC != 23 {
		t.Fatalf("sample %+v", got)
	}
}

// TestStamp: T is the mean of the midpoints and T ± TUnc covers each
// reading's interval (worked by hand: midpoints 10, 12, 14 ms with half
// round trips 1, 3, 1 ms → T = 12 ms; intervals [9,11], [9,15], [13,15] →
// TUnc = max(2+1, 0+3, 2+1) = 3 ms).
func TestStamp(t *testing.T) {
	ms := time.Millisecond
	rs := []instr.Reading{
		{At: t0.Add(10 * ms), AtUncertainty: 1 * ms},
		{At: t0.Add(12 * ms), AtUncertainty: 3 * ms},
		{At: t0.Add(14 * ms), AtUncertainty: 1 * ms},
	}
	tt, unc := Stamp(t0, rs)
	if tt != 12*ms || unc != 3*ms {
		t.Fatalf("T %v ± %v, want 12ms ± 3ms", tt, unc)
	}
	if tt, unc := Stamp(t0, nil); tt != 0 || unc != 0 {
		t.Fatal("empty")
	}
}

func TestMissingAndFailedChannels(t *testing.T) {
	s, err := New(Roles{
		Supply:     &fake{value: 1, at: time.Millisecond},
		Integrator: &fake{err: errors.New("no reply")},
	}, t0)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	got, err := s.Read(context.Background())
	if err == nil || !strings.Contains(err.Error(), "integrator: read flux: no reply") {
		t.Fatalf("got %v, want the integrator named", err)
	}
	if got.I != 1 || !math.IsNaN(got.Psi) || !math.IsNaN(got.BProbe) || !math.IsNaN(got.TempC) {
		t.Fatalf("sample %+v", got)
	}
	s.Close()
	if _, err := s.Read(context.Background()); err == nil {
		t.Fatal("read after close")
	}
}

func TestRequiredRoles(t *testing.T) {
	if _, err := New(Roles{Integrator: &fake{}}, t0); err == nil {
		t.Fatal("no supply accepted")
	}
}

// TestChannelTimes: T is the flux reading's midpoint and each other
// channel keeps its offset from it; TUnc is the largest half round trip.
// Worked by hand: flux at 20 ms, current at 14 ms (voltage read after it at
// 14 ms too: the fake stamps both alike), field at 23 ms → T 20 ms, DtI
// −6 ms, DtB +3 ms; half round trips 1, 2, 4 ms → TUnc 4 ms. Without an
// integrator T is the current's midpoint and DtI is 0.
func TestChannelTimes(t *testing.T) {
	ms := time.Millisecond
	tests := []struct {
		name          string
		roles         Roles
		t, dtI, dtB   time.Duration
		unc           time.Duration
		psiNaN, bvNaN bool
	}{
		{"all channels", Roles{
			Supply:     &fake{value: 1, at: 14 * ms, unc: 2 * ms},
			Integrator: &fake{value: 1e-4, at: 20 * ms, unc: 1 * ms},
			FieldMeter: fieldFake{&fake{value: 0.2, at: 23 * ms, unc: 4 * ms}},
		}, 20 * ms, -6 * ms, 3 * ms, 4 * ms, false, false},
		{"supply and integrator", Roles{
			Supply:     &fake{value: 1, at: 30 * ms, unc: 1 * ms},
			Integrator: &fake{value: 1e-4, at: 25 * ms, unc: 1 * ms},
		}, 25 * ms, 5 * ms, 0, 1 * ms, false, true},
		{"supply only", Roles{
			Supply: &fake{value: 1, at: 7 * ms, unc: 1 * ms},
		}, 7 * ms, 0, 0, 1 * ms, true, true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s, err := New(tc.roles, t0)
			if err != nil {
				t.Fatal(err)
			}
			defer s.Close()
			got, err := s.Read(context.Background())
			if err != nil {
				t.Fatal(err)
			}
			if got.T != tc.t || got.DtI != tc.dtI || got.DtB != tc.dtB || got.TUnc != tc.unc {
				t.Errorf("T %v DtI %v DtB %v TUnc %v; want %v %v %v %v", got.T, got.DtI, got.DtB, got.TUnc, tc.t, tc.dtI, tc.dtB, tc.unc)
			}
			if math.IsNaN(got.Psi) != tc.psiNaN || math.IsNaN(got.BProbe) != tc.bvNaN {
				t.Errorf("sample %+v", got)
			}
		})
	}
}

// lateFake times out its first n flux reads (a late reply on a live line),
// then answers; its status and overload are fixed.
type lateFake struct {
	*fake
	late int
	st   instr.SupplyStatus
	ov   bool
}

func (f *lateFake) ReadFlux(ctx context.Context) (instr.Reading, error) {
	if f.late > 0 {
		f.late--
		return instr.Reading{}, fmt.Errorf("read: %w", link.ErrTimeout)
	}
	return f.fake.reading(ctx)
}
func (f *lateFake) Status(context.Context) (instr.SupplyStatus, error) { return f.st, nil }
func (f *lateFake) Overloaded(context.Context) (bool, error)           { return f.ov, nil }

// TestReadAllStatusAndRetry: with Options.Status the supply's status and the
// integrator's overload come with the sample; two late replies are read
// again and counted; a hang-up is not retried.
func TestReadAllStatusAndRetry(t *testing.T) {
	sup := &lateFake{fake: &fake{value: 2}, st: instr.SupplyStatus{OutputOn: true, Compliance: true}}
	integ := &lateFake{fake: &fake{value: 3e-4}, late: 2, ov: true}
	s, err := NewWith(Roles{Supply: sup, Integrator: integ}, t0, Options{Status: true})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var n atomic.Int64
	got, err := s.ReadAll(WithRetryCounter(context.Background(), &n))
	if err != nil {
		t.Fatal(err)
	}
	if !got.Status.OutputOn || !got.Status.Compliance || !got.Overload || got.Sample.Psi != 3e-4 || n.Load() != 2 {
		t.Fatalf("reading %+v, %d re-reads", got, n.Load())
	}
	hung := &fake{err: fmt.Errorf("read: %w", link.ErrDisconnected)}
	s2, err := New(Roles{Supply: sup, Integrator: hung}, t0)
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	_, err = s2.Read(context.Background())
	var re *RoleError
	if !errors.As(err, &re) || re.Role != "integrator" || !errors.Is(err, link.ErrDisconnected) {
		t.Fatalf("got %v, want the integrator's hang-up", err)
	}
}
