package sampler

import (
	"context"
	"log/slog"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"hystd/drivers/instr"
	"hystd/drivers/link/linktest"
	"hystd/drivers/profile"
)

// ptyRoles opens the sim profiles' supply, integrator and field meter on
// three ptys answered by the handlers (nil: answer's replies).
func ptyRoles(t *testing.T, sup, integ, field linktest.Handler) Roles {
	t.Helper()
	ctx := context.Background()
	o := profile.Options{Log: slog.New(slog.DiscardHandler)}
	serve := func(id string, h linktest.Handler) string {
		p, err := linktest.Open()
		if err != nil {
			t.Skipf("no ptys: %v", err)
		}
		base := answer(id)
		r := linktest.Serve(p, "\n", "\n", 0, func(cmd string) (string, bool) {
			if h != nil {
				if reply, ok := h(cmd); ok {
					return reply, true
				}
			}
			return base(cmd)
		})
		t.Cleanup(func() { r.Stop(); p.Close() })
		return p.Path
	}
	s, err := profile.OpenSupply(ctx, profile.Spec{Port: serve("HYSTD-SIM,BIPOLAR-SUPPLY", sup), Profile: "sim-supply"}, o)
	if err != nil {
		t.Fatal(err)
	}
	i, err := profile.OpenIntegrator(ctx, profile.Spec{Port: serve("HYSTD-SIM,FLUX-INTEGRATOR", integ), Profile: "sim-integrator"}, o)
	if err != nil {
		t.Fatal(err)
	}
	f, err := profile.OpenFieldMeter(ctx, profile.Spec{Port: serve("HYSTD-SIM,HALL-METER", field), Profile: "sim-fieldmeter"}, o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close(); i.Close(); f.Close() })
	return Roles{Supply: s, Integrator: i, FieldMeter: f}
}

// The profile instruments are read in the overlapped round: the supply
// answers its current query only once the integrator's and the field
// meter's queries have reached their instruments, which a reader that
// waits for each reply before the next query never gets to (it would time
// out and re-read). The values are the replies, nothing is re-read, and
// each channel's stamp (its midpoint ± TUnc) contains the instant its
// instrument handled the query, taken on the instruments' side.
func TestOverlappedRoundOnPtys(t *testing.T) {
	var mu sync.Mutex
	handled := map[string]time.Time{}
	note := func(cmd string) {
		mu.Lock()
		defer mu.Unlock()
		if _, ok := handled[cmd]; !ok {
			handled[cmd] = time.Now()
		}
	}
	flux, field := make(chan struct{}), make(chan struct{})
	var fluxOnce, fieldOnce sync.Once
	var waited atomic.Bool // the supply's current reply waited for both other queries
	sup := func(cmd string) (string, bool) {
		if cmd == "MEAS:CURR?" {
			note(cmd)
			ok := true
			for _, ch := range []chan struct{}{flux, field} {
				select {
				case <-ch:
				case <-time.After(10 * time.Second):
					ok = false
				}
			}
			waited.Store(ok)
		}
		if cmd == "MEAS:VOLT?" {
			note(cmd)
		}
		return "", false
	}
	integ := func(cmd string) (string, bool) {
		if cmd == "FETC:FLUX?" {
			note(cmd)
			fluxOnce.Do(func() { close(flux) })
		}
		return "", false
	}
	fm := func(cmd string) (string, bool) {
		if cmd == "MEAS:FIEL?" {
			note(cmd)
			fieldOnce.Do(func() { close(field) })
		}
		return "", false
	}
	roles := ptyRoles(t, sup, integ, fm)
	for _, r := range []any{roles.Supply, roles.Integrator, roles.FieldMeter} {
		if _, ok := r.(instr.Overlapped); !ok {
			t.Fatalf("%T is not instr.Overlapped", r)
		}
	}
	start := time.Now()
	s, err := New(roles, start)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var n atomic.Int64
	ctx, cancel := context.WithTimeout(WithRetryCounter(context.Background(), &n), 30*time.Second)
	defer cancel()
	got, err := s.Read(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if !waited.Load() || n.Load() != 0 {
		t.Fatalf("the queries were not in flight together: waited %v, %d re-reads", waited.Load(), n.Load())
	}
	// Replies of answer() (the responders' fixed values).
	if got.I != 1.23456 || got.V != 0.987654 || got.Psi != -2.468e-4 || got.BProbe != 0.15 {
		t.Fatalf("sample %+v", got)
	}
	mu.Lock()
	defer mu.Unlock()
	for _, c := range []struct {
		cmd string
		mid time.Duration
	}{{"MEAS:CURR?", got.T + got.DtI}, {"FETC:FLUX?", got.T}, {"MEAS:FIEL?", got.T + got.DtB}} {
		at := handled[c.cmd].Sub(start)
		if d := at - c.mid; d < -got.TUnc || d > got.TUnc {
			t.Errorf("%s handled at %v, outside its stamp %v ± %v", c.cmd, at, c.mid, got.TUnc)
		}
	}
}

// A reply later than the profile's timeout (500 ms for sim-integrator) is
// read again in the overlapped round: the line is resynchronised (the late
// reply, a value no reading may take, is discarded), the read is counted,
// and the sample carries the next reply; the other lines are unaffected.
func TestOverlappedLateReply(t *testing.T) {
	var asked atomic.Int64
	integ := func(cmd string) (string, bool) {
		if cmd == "FETC:FLUX?" && asked.Add(1) == 1 {
			time.Sleep(700 * time.Millisecond)
			return "-9.990000E-04", true
		}
		return "", false
	}
	s, err := New(ptyRoles(t, nil, integ, nil), time.Now())
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var n atomic.Int64
	ctx, cancel := context.WithTimeout(WithRetryCounter(context.Background(), &n), 30*time.Second)
	defer cancel()
	for k := range 3 {
		got, err := s.Read(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if got.Psi != -2.468e-4 || got.I != 1.23456 || got.BProbe != 0.15 {
			t.Fatalf("read %d: sample %+v: the late reply was taken for a reading", k, got)
		}
	}
	if n.Load() < 1 {
		t.Fatal("the late reply was not counted as a re-read")
	}
}
