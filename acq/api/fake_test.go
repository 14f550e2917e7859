package api

import (
	"context"
	"fmt"
	"math"
	"sort"
	"sync"
	"time"

	"hystd/acq/live"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/calib/units"
)

// memReader is an in-memory record.Reader for the API tests.
type memReader struct {
	mu     sync.Mutex
	runs   map[string]record.Run
	loops  map[string][]record.Loop
	events map[string][]record.Event
	last   record.RunFilter
	panic  bool
}

func newMemReader() *memReader {
	return &memReader{runs: map[string]record.Run{}, loops: map[string][]record.Loop{}, events: map[string][]record.Event{}}
}

func (m *memReader) put(r record.Run, loops ...record.Loop) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.runs[r.ID] = r
	m.loops[r.ID] = loops
}

func (m *memReader) setState(id string, s record.State, reason string, at time.Time) {
	m.mu.Lock()
	defer m.mu.Unlock()
	r := m.runs[id]
	r.State, r.Reason = s, reason
	if s == record.Running {
		r.Started = at
	}
	if s.Ended() {
		r.Ended = at
	}
	m.runs[id] = r
}

func (m *memReader) Runs(ctx context.Context, f record.RunFilter) ([]record.Run, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.panic {
		panic("store exploded")
	}
	m.last = f
	var out []record.Run
	for _, r := range m.runs {
		if (f.Fixture != "" && r.Fixture != f.Fixture) || (f.Specimen != "" && r.Specimen != f.Specimen) ||
			(f.Material != "" && r.Material != f.Material) || (f.State != "" && r.State != f.State) ||
			(!f.Since.IsZero() && r.Started.Before(f.Since)) || (!f.Until.IsZero() && !r.Started.Before(f.Until)) {
			continue
		}
		out = append(out, r)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Started.After(out[j].Started) })
	if f.Limit > 0 && len(out) > f.Limit {
		out = out[:f.Limit]
	}
	return out, nil
}

func (m *memReader) Run(ctx context.Context, id string) (record.Run, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	r, ok := m.runs[id]
	if !ok {
		return r, fmt.Errorf("run %q: %w", id, record.ErrNotFound)
	}
	return r, nil
}

func (m *memReader) Loops(ctx context.Context, id string) ([]record.Loop, error) {
	if _, err := m.Run(ctx, id); err != nil {
		return nil, err
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	var out []record.Loop
	for _, l := range m.loops[id] {
		l.Points, l.Raw = nil, nil
		out = append(out, l)
	}
	return out, nil
}

func (m *memReader) Loop(ctx context.Context, id string, n int) (record.Loop, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	for _, l := range m.loops[id] {
		if l.N == n {
			return l, nil
		}
	}
	return record.Loop{}, fmt.Errorf("run %q loop %d: %w", id, n, record.ErrNotFound)
}

// The fake keeps one revision per run (re-processing is tested on memstore).
func (m *memReader) Revisions(ctx context.Context, id string) ([]record.Revision, error) {
	r, err := m.Run(ctx, id)
	if err != nil {
		return nil, err
	}
	return []record.Revision{record.FirstRevision(r)}, nil
}

func (m *memReader) LoopsOf(ctx context.Context, id string, rev int) ([]record.Loop, error) {
	if rev > 1 {
		return nil, fmt.Errorf("run %q revision %d: %w", id, rev, record.ErrNotFound)
	}
	return m.Loops(ctx, id)
}

func (m *memReader) LoopOf(ctx context.Context, id string, n, rev int) (record.Loop, error) {
	if rev > 1 {
		return record.Loop{}, fmt.Errorf("run %q revision %d: %w", id, rev, record.ErrNotFound)
	}
	return m.Loop(ctx, id, n)
}

func (m *memReader) Events(ctx context.Context, id string) ([]record.Event, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	return m.events[id], nil
}

func (m *memReader) Trend(ctx context.Context, specimen, figure string, since time.Time) ([]record.TrendPoint, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	var out []record.TrendPoint
	for id, r := range m.runs {
		if r.Specimen != specimen || r.Started.Before(since) {
			continue
		}
		for _, l := range m.loops[id] {
			for _, f := range l.Figures {
				if f.Name == figure {
					out = append(out, record.TrendPoint{RunID: id, Loop: l.N, At: r.Started, Value: f.Value, U: f.U})
				}
			}
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].At.Before(out[j].At) })
	return out, nil
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

// fakeRunner validates recipes with the real recipe parser and plays a run
// into a memReader and a hub: queued → running → live samples → finished,
// unless aborted. Steps advance only when the test calls step, so no test
// sleeps.
type fakeRunner struct {
	mu      sync.Mutex
	reader  *memReader
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
	f.reader.put(record.Run{ID: id, Recipe: r.Name, Fixture: "ring-bench", Specimen: "R-17", Material: "FeSi3", State: record.Queued, Queued: at})
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
	r, err := f.reader.Run(ctx, id)
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
	f.reader.setState(id, record.Aborted, "aborted on request", at)
	f.hub.Publish(live.Event{Kind: live.KindState, RunID: id, State: record.Aborted, Reason: "aborted on request", At: at})
	return nil
}

func (f *fakeRunner) callCount() int {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.calls
}
