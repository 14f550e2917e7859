package api

import (
	"context"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"hystd/acq/live"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/store/memstore"
	"hystd/calib/units"
)

// testStore is the store of the API tests: a memstore (the one in-memory
// store, held to the shared suite acq/store/storetest) with one test hook,
// a panic injected into Runs to show that a handler's panic becomes a 500.
type testStore struct {
	*memstore.Store
	explode atomic.Bool
}

func newTestStore() *testStore { return &testStore{Store: memstore.New(nil)} }

// Runs panics once explode is set; otherwise it is memstore's.
func (s *testStore) Runs(ctx context.Context, f record.RunFilter) ([]record.Run, error) {
	if s.explode.Load() {
		panic("store exploded")
	}
	return s.Store.Runs(ctx, f)
}

// put stores a run with its loops as the engine does (CreateRun, AddLoop)
// and fails the test if the store refuses them.
func put(t testing.TB, w record.Writer, r record.Run, loops ...record.Loop) {
	t.Helper()
	ctx := context.Background()
	if err := w.CreateRun(ctx, r); err != nil {
		t.Fatal(err)
	}
	for _, l := range loops {
		if err := w.AddLoop(ctx, l); err != nil {
			t.Fatal(err)
		}
	}
}

// addEvents stores events and fails the test if the store refuses one.
func addEvents(t testing.TB, w record.Writer, evs ...record.Event) {
	t.Helper()
	for _, e := range evs {
		if err := w.AddEvent(context.Background(), e); err != nil {
			t.Fatal(err)
		}
	}
}

// tanhLoop is an analytic major loop B = Bs·tanh((H ∓ Hc)/a) + μ0·H, 2n+1
// points, with its figures computed in closed form (Br = Bs·tanh(Hc/a) on
// the falling branch at H = 0; HcB ≈ Hc, neglecting μ0·H). Test input only.
func tanhLoop(id string, n int, hmax, hc, a, bs float64) record.Loop {
	l := record.Loop{RunID: id, N: 1, Kind: "loop", Amplitude: hmax, AmpUnit: "A/m"}
	add := func(h float64, br int) {
		shift := hc
		if br < 0 {
			shift = -hc
		}
		b := bs*math.Tanh((h-shift)/a) + units.Mu0*h
		l.Points = append(l.Points, record.Point{T: time.Duration(len(l.Points)) * 10 * time.Millisecond, H: h, B: b, J: b - units.Mu0*h, Branch: br})
		l.Raw = append(l.Raw, record.Sample{T: time.Duration(len(l.Raw)) * 10 * time.Millisecond, Phase: record.Sweep,
			I: h / 1000, Psi: b * 5e-3, BProbe: math.NaN(), TempC: 23})
	}
	for i := 0; i <= n; i++ {
		add(hmax-2*hmax*float64(i)/float64(n), -1)
	}
	for i := 1; i <= n; i++ {
		add(-hmax+2*hmax*float64(i)/float64(n), +1)
	}
	l.Figures = []record.Figure{
		{Name: "Br", Value: bs * math.Tanh(hc/a), U: 0.004, Unit: "T", Note: "mean of both branches"},
		{Name: "HcB", Value: hc, U: 3, Unit: "A/m"},
		{Name: "mu_a", Value: 0, U: math.NaN(), Unit: "1", Note: "not evaluated"},
	}
	l.Corrections = []record.Correction{{Name: "closure", Size: 0.0021, Unit: "T"}, {Name: "centering", Size: -0.003, Unit: "T"}}
	return l
}

// fakeRunner validates recipes with the real recipe parser, stores a
// submitted run as queued and ends it as aborted on request, in the store
// and on the hub, at the times of its injected clock (no test sleeps).
type fakeRunner struct {
	mu      sync.Mutex
	store   *testStore
	hub     *live.Hub
	now     func() time.Time
	calls   int
	seq     int
	aborted map[string]bool
	users   []string // UserFrom of each Submit and Abort call's context
}

func (f *fakeRunner) Submit(ctx context.Context, fixture string, data []byte) (string, error) {
	f.mu.Lock()
	f.calls++
	if u, ok := UserFrom(ctx); ok {
		f.users = append(f.users, "submit "+u.Name)
	}
	f.mu.Unlock()
	r, err := recipe.Parse("submitted recipe", data)
	if err != nil {
		return "", err
	}
	if fixture != "" && fixture != "ring-bench" {
		return "", fmt.Errorf("fixture %q: %w", fixture, ErrInvalid)
	}
	f.mu.Lock()
	f.seq++
	id := fmt.Sprintf("RUN-%03d", f.seq)
	f.mu.Unlock()
	at := f.now()
	if err := f.store.CreateRun(ctx, record.Run{ID: id, Recipe: r.Name, Fixture: "ring-bench", Specimen: "R-17", Material: "FeSi3", State: record.Queued, Queued: at}); err != nil {
		return "", err
	}
	f.hub.Publish(live.Event{Kind: live.KindState, RunID: id, State: record.Queued, At: at})
	return id, nil
}

func (f *fakeRunner) Abort(ctx context.Context, id string) error {
	f.mu.Lock()
	f.calls++
	if u, ok := UserFrom(ctx); ok {
		f.users = append(f.users, "abort "+u.Name)
	}
	f.mu.Unlock()
	r, err := f.store.Run(ctx, id)
	if err != nil {
		return err
	}
	if r.State.Ended() {
		return fmt.Errorf("run %s already %s: %w", id, r.State, ErrConflict)
	}
	f.mu.Lock()
	if f.aborted == nil {
		f.aborted = map[string]bool{}
	}
	f.aborted[id] = true
	f.mu.Unlock()
	at := f.now()
	if err := f.store.SetState(ctx, id, record.Aborted, "aborted on request", at); err != nil {
		return err
	}
	f.hub.Publish(live.Event{Kind: live.KindState, RunID: id, State: record.Aborted, Reason: "aborted on request", At: at})
	return nil
}

func (f *fakeRunner) callCount() int {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.calls
}
