package influx_test

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/demo"
	"hystd/acq/influx"
	"hystd/acq/influx/vmtest"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
	"hystd/configs"
)

// These tests run against a real VictoriaMetrics server (package vmtest),
// an implementation of the InfluxDB v2 write API outside this project, and
// read every point back through its /api/v1/export.

func TestMain(m *testing.M) {
	if mode := os.Getenv("HYSTD_KILL_CHILD"); mode != "" {
		os.Exit(killChild(mode))
	}
	os.Exit(m.Run())
}

var t0 = time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)

func quiet() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

func vmConfig(url string) influx.Config {
	return influx.Config{URL: url, Org: "lab", Bucket: "hystd", BatchSize: 1000, TokenEnv: "HYSTD_TEST_NO_TOKEN",
		MinBackoff: configs.Duration(20 * time.Millisecond), MaxBackoff: configs.Duration(300 * time.Millisecond),
		PollInterval: configs.Duration(50 * time.Millisecond)}
}

// demoRun stores run id with loops of n samples each; it returns what was stored.
func demoRun(t *testing.T, st *store.Store, id string, start time.Time, loops, n int) (record.Run, []record.Loop) {
	t.Helper()
	ctx := context.Background()
	r := storetest.SampleRun(id, start)
	if err := st.CreateRun(ctx, r); err != nil {
		t.Fatal(err)
	}
	var ls []record.Loop
	for i := 1; i <= loops; i++ {
		l := storetest.SampleLoop(id, i, n, start.Add(time.Duration(i)*time.Minute))
		// Give each loop its own time span, as a real run has.
		for k := range l.Raw {
			l.Raw[k].T += time.Duration(i) * time.Minute
		}
		for k := range l.Points {
			l.Points[k].T += time.Duration(i) * time.Minute
		}
		if err := st.AddLoop(ctx, l); err != nil {
			t.Fatal(err)
		}
		ls = append(ls, l)
	}
	return r, ls
}

// expected lists every field value the points of the loops carry, as the
// server names them (vmtest.AddPoints).
func expected(t *testing.T, r record.Run, loops []record.Loop) map[string]float64 {
	t.Helper()
	want := map[string]float64{}
	for _, l := range loops {
		pts, err := influx.Points(r, l)
		if err != nil {
			t.Fatal(err)
		}
		if err := vmtest.AddPoints(want, pts); err != nil {
			t.Fatal(err)
		}
	}
	return want
}

// checkOnce reads the run's series back and requires every expected value
// exactly once and nothing else. Values are compared to 1e-12 of the largest
// magnitude in their series: the server keeps a block of samples as
// integers with a shared decimal exponent, not as binary64 (from memory of
// its storage design; seen here as 4.4e-16 read back for 4.4087e-16 sent in a
// series of values near 1), so digits far below the block's largest value
// are dropped.
func checkOnce(t *testing.T, srv *vmtest.Server, runIDs []string, want map[string]float64) {
	t.Helper()
	match := fmt.Sprintf(`{__name__=~"hyst_.*",run=~"%s"}`, strings.Join(runIDs, "|"))
	series, err := srv.WaitCount(context.Background(), match, len(want))
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]int{}
	bad := 0
	scale := map[string]float64{}
	for k, w := range want {
		sk := k[:strings.LastIndex(k, "@")]
		scale[sk] = math.Max(scale[sk], math.Abs(w))
	}
	for _, s := range series {
		for i, v := range s.Values {
			k := vmtest.Key(s.Metric["__name__"], s.Metric, s.Timestamps[i])
			seen[k]++
			w, ok := want[k]
			if !ok {
				if bad++; bad < 5 {
					t.Errorf("unexpected sample %s = %v", k, v)
				}
				continue
			}
			if math.Abs(v-w) > 1e-12*scale[k[:strings.LastIndex(k, "@")]] {
				if bad++; bad < 5 {
					t.Errorf("%s = %v, sent %v", k, v, w)
				}
			}
		}
	}
	missing, dups := 0, 0
	for k := range want {
		switch n := seen[k]; {
		case n == 0:
			if missing++; missing < 5 {
				t.Errorf("missing %s", k)
			}
		case n > 1:
			if dups++; dups < 5 {
				t.Errorf("%s arrived %d times", k, n)
			}
		}
	}
	if missing+dups+bad > 0 {
		t.Fatalf("%d expected samples: %d missing, %d duplicated, %d wrong or unexpected", len(want), missing, dups, bad)
	}
	t.Logf("%d samples in %d series read back exactly once", vmtest.Count(series), len(series))
}

func openStore(t *testing.T, path string) *store.Store {
	t.Helper()
	st, err := store.Open(context.Background(), path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	return st
}

func TestVMEverySampleOnce(t *testing.T) {
	srv := vmtest.Start(t)
	st := openStore(t, filepath.Join(t.TempDir(), "hystd.db"))
	r, loops := demoRun(t, st, "demo-1", t0, 3, 2000)
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	n, err := influx.DeliverAll(ctx, st, vmConfig(srv.URL))
	if err != nil {
		t.Fatal(err)
	}
	if b, _ := st.Backlog(ctx); b.Pending != 0 || b.Quarantined != 0 {
		t.Fatalf("backlog after delivery: %+v", b)
	}
	want := expected(t, r, loops)
	t.Logf("%d points sent, %d field values", n, len(want))
	checkOnce(t, srv, []string{"demo-1"}, want)

	// Delivering again sends nothing: the outbox is empty.
	if n, err := influx.DeliverAll(ctx, st, vmConfig(srv.URL)); err != nil || n != 0 {
		t.Fatalf("second DeliverAll: %d points, %v", n, err)
	}
	checkOnce(t, srv, []string{"demo-1"}, want)
}

// TestVMDemoRun: the demo (simulated bench over pseudo-terminals, the real
// engine and store) records a run and sends it, as `hystd demo --influx-url`
// does; every sample and figure of it reads back from the server exactly
// once, and a second delivery sends nothing more.
func TestVMDemoRun(t *testing.T) {
	srv := vmtest.Start(t)
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	defer cancel()
	cfg := vmConfig(srv.URL)
	res, err := demo.Run(ctx, demo.Options{DataDir: t.TempDir(), Software: "test", Influx: &cfg})
	if err != nil {
		t.Fatal(err)
	}
	st := openStore(t, res.DB)
	n, err := influx.DeliverAll(ctx, st, cfg)
	if err != nil || n != 0 {
		t.Fatalf("after the demo delivered: %d more points, %v", n, err)
	}
	if len(res.Loops) == 0 {
		t.Fatal("the demo recorded no loop")
	}
	samples := 0
	for _, l := range res.Loops {
		samples += len(l.Raw)
	}
	t.Logf("demo run %s: %d loops, %d raw samples, %d points sent", res.Run.ID, len(res.Loops), samples, n)
	r, err := st.Run(ctx, res.Run.ID)
	if err != nil {
		t.Fatal(err)
	}
	checkOnce(t, srv, []string{r.ID}, expected(t, r, res.Loops))
}

// TestVMServerDown: the server is down while five runs are recorded; the
// forwarder keeps retrying; after the server returns every point arrives
// once.
func TestVMServerDown(t *testing.T) {
	srv := vmtest.Start(t)
	st := openStore(t, filepath.Join(t.TempDir(), "hystd.db"))
	f, err := influx.New(vmConfig(srv.URL), st, influx.Options{Log: quiet()})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f.Run(ctx) }()
	defer func() { cancel(); <-done }()

	// One run while the server is up, so the forwarder has a connection.
	want := map[string]float64{}
	ids := []string{}
	add := func(id string, at time.Time) {
		r, ls := demoRun(t, st, id, at, 2, 700)
		for k, v := range expected(t, r, ls) {
			want[k] = v
		}
		ids = append(ids, id)
		f.Kick()
	}
	add("up-0", t0)
	waitBacklog(t, st, 0)

	srv.Stop()
	for i := 1; i <= 5; i++ {
		add(fmt.Sprintf("down-%d", i), t0.Add(time.Duration(i)*time.Hour))
	}
	// The forwarder has tried and failed while the server was away.
	deadline := time.Now().Add(10 * time.Second)
	for {
		p, err := st.Pending(context.Background(), 0)
		if err != nil {
			t.Fatal(err)
		}
		if len(p) == 10 && p[0].Attempts >= 2 {
			t.Logf("server down: %d loops pending, first tried %d times: %s", len(p), p[0].Attempts, p[0].LastError)
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("pending while down: %+v", p)
		}
		time.Sleep(50 * time.Millisecond)
	}
	srv.Restart()
	waitBacklog(t, st, 0)
	checkOnce(t, srv, ids, want)
}

func waitBacklog(t *testing.T, st *store.Store, n int) {
	t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for {
		b, err := st.Backlog(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if b.Pending == n {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("backlog stays at %+v, want %d pending", b, n)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// killChild is the daemon stand-in of TestVMKill9, run as a child process:
// it commits two loops, then either stops before sending anything
// ("before") or sends the first batch and stops ("mid"), and waits to be
// killed.
func killChild(mode string) int {
	ctx := context.Background()
	st, err := store.Open(ctx, os.Getenv("HYSTD_KILL_DB"))
	if err != nil {
		fmt.Println("error", err)
		return 1
	}
	r := storetest.SampleRun("kill-"+mode, t0)
	if err := st.CreateRun(ctx, r); err != nil {
		fmt.Println("error", err)
		return 1
	}
	for i := 1; i <= 2; i++ {
		if err := st.AddLoop(ctx, storetest.SampleLoop(r.ID, i, 1500, t0.Add(time.Duration(i)*time.Hour))); err != nil {
			fmt.Println("error", err)
			return 1
		}
	}
	fmt.Println("committed")
	if mode == "before" {
		select {}
	}
	cfg := vmConfig(os.Getenv("HYSTD_KILL_URL"))
	cfg.BatchSize = 400
	f, err := influx.New(cfg, st, influx.Options{Log: quiet(), AfterBatch: func(store.OutboxEntry, int, int) {
		fmt.Println("batch")
		select {}
	}})
	if err != nil {
		fmt.Println("error", err)
		return 1
	}
	f.Drain(ctx)
	return 1
}

// TestVMKill9: the daemon is killed with SIGKILL after the local commit,
// before (or part way through) delivery. A new forwarder on the same file
// delivers everything, each point once.
func TestVMKill9(t *testing.T) {
	srv := vmtest.Start(t)
	for _, tc := range []struct{ mode, trigger string }{{"before", "committed"}, {"mid", "batch"}} {
		t.Run(tc.mode, func(t *testing.T) {
			db := filepath.Join(t.TempDir(), "hystd.db")
			cmd := exec.Command(os.Args[0], "-test.run=^$")
			cmd.Env = append(os.Environ(), "HYSTD_KILL_CHILD="+tc.mode, "HYSTD_KILL_DB="+db, "HYSTD_KILL_URL="+srv.URL)
			out, err := cmd.StdoutPipe()
			if err != nil {
				t.Fatal(err)
			}
			cmd.Stderr = os.Stderr
			if err := cmd.Start(); err != nil {
				t.Fatal(err)
			}
			sc := bufio.NewScanner(out)
			got := false
			for sc.Scan() {
				line := sc.Text()
				if strings.HasPrefix(line, "error") {
					t.Fatal("child:", line)
				}
				if line == tc.trigger {
					got = true
					break
				}
			}
			if !got {
				cmd.Process.Kill()
				cmd.Wait()
				t.Fatalf("child ended before %q", tc.trigger)
			}
			if err := cmd.Process.Kill(); err != nil { // SIGKILL
				t.Fatal(err)
			}
			cmd.Wait()

			st := openStore(t, db)
			p, err := st.Pending(context.Background(), 0)
			if err != nil {
				t.Fatal(err)
			}
			if len(p) != 2 {
				t.Fatalf("after kill: %d pending loops, want 2", len(p))
			}
			if tc.mode == "mid" && p[0].Done != 400 {
				t.Fatalf("after kill mid-delivery: progress %d, want 400 (one batch)", p[0].Done)
			}
			t.Logf("after kill -9: %d loops pending, first at point %d", len(p), p[0].Done)
			r, err := st.Run(context.Background(), "kill-"+tc.mode)
			if err != nil {
				t.Fatal(err)
			}
			var loops []record.Loop
			for i := 1; i <= 2; i++ {
				l, err := st.Loop(context.Background(), r.ID, i)
				if err != nil {
					t.Fatal(err)
				}
				loops = append(loops, l)
			}
			ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
			defer cancel()
			if _, err := influx.DeliverAll(ctx, st, vmConfig(srv.URL)); err != nil {
				t.Fatal(err)
			}
			checkOnce(t, srv, []string{r.ID}, expected(t, r, loops))
		})
	}
}

// BenchmarkForwardLoopback: points per second from the store to the
// loopback server, batches of 5000 (target ≥ 100 000 points/s, PRODUCT.md).
// Each point carries 10 fields.
func BenchmarkForwardLoopback(b *testing.B) {
	srv := vmtest.Start(b)
	st, err := store.Open(context.Background(), filepath.Join(b.TempDir(), "hystd.db"))
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	ctx := context.Background()
	const n = 20000
	if err := st.CreateRun(ctx, storetest.SampleRun("bench", t0)); err != nil {
		b.Fatal(err)
	}
	for i := 0; i < b.N; i++ {
		if err := st.AddLoop(ctx, storetest.SampleLoop("bench", i+1, n, t0.Add(time.Duration(i)*time.Hour))); err != nil {
			b.Fatal(err)
		}
	}
	cfg := vmConfig(srv.URL)
	cfg.BatchSize = 5000
	f, err := influx.New(cfg, st, influx.Options{Log: quiet()})
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	b.ResetTimer()
	sent, err := f.Drain(ctx)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportMetric(float64(sent)/b.Elapsed().Seconds(), "points/s")
}

// TestVMFlapping: the server goes away three times while a backlog of
// twelve loops is being delivered, in the middle of the stream. With the
// server deduplicating at 1 ms, as the README tells users to run it, every
// value is there once afterwards; the test also requires that the outages
// really hit the forwarder (failed attempts recorded).
func TestVMFlapping(t *testing.T) {
	srv := vmtest.Start(t, "-dedup.minScrapeInterval=1ms")
	st := openStore(t, filepath.Join(t.TempDir(), "hystd.db"))
	want := map[string]float64{}
	var ids []string
	for i := 0; i < 6; i++ {
		id := fmt.Sprintf("flap-%d", i)
		r, ls := demoRun(t, st, id, t0.Add(time.Duration(i)*time.Hour), 2, 2500)
		for k, v := range expected(t, r, ls) {
			want[k] = v
		}
		ids = append(ids, id)
	}
	cfg := vmConfig(srv.URL)
	cfg.BatchSize = 500
	f, err := influx.New(cfg, st, influx.Options{Log: quiet()})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f.Run(ctx) }()
	defer func() { cancel(); <-done }()
	for _, left := range []int{10, 7, 4} {
		waitBacklogAtMost(t, st, left)
		srv.Stop()
		time.Sleep(300 * time.Millisecond) // the forwarder meets a closed port
		srv.Restart()
	}
	waitBacklog(t, st, 0)
	attempts := 0
	for id := int64(1); id <= 12; id++ {
		e, err := st.Entry(context.Background(), id)
		if err != nil {
			t.Fatal(err)
		}
		attempts += e.Attempts
	}
	if attempts == 0 {
		t.Fatal("no failed attempt recorded: the outages missed the forwarder")
	}
	t.Logf("%d failed attempts during three outages", attempts)
	checkOnce(t, srv, ids, want)
}

func waitBacklogAtMost(t *testing.T, st *store.Store, n int) {
	t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for {
		b, err := st.Backlog(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if b.Pending <= n {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("backlog stays at %+v, want ≤ %d pending", b, n)
		}
		time.Sleep(5 * time.Millisecond)
	}
}
