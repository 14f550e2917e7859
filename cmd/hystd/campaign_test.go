package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"hystd/acq/config/configtest"
	"hystd/acq/fixture/fixturetest"
	"hystd/acq/influx"
	"hystd/acq/influx/vmtest"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/configs"
	"hystd/drivers/instr"
	"hystd/drivers/link"
	"hystd/drivers/sim"
)

// The fault campaign drives `hystd serve`, built from this package and run
// as a child process, through many runs on the simulated bench (served in
// this test process) with random instrument faults of every kind and
// random kill -9 restarts, and after every ending and every restart checks
// the bench's ground truth, never the daemon's belief:
//
//   - the winding current is zero and the output off (the daemon halts
//     before it records an ending, and before it listens after a start);
//   - every stored loop is stored once, and a finished run has its loop;
//   - no stored sample has a channel out of step (shiftedSamples);
//   - every fault that fired while a run was under way is visible in that
//     run's stored reason or events (kind by kind, see evidence): an
//     invisible fault fails the test in every form;
//   - every stored loop reached the time-series database exactly once
//     (a real VictoriaMetrics server, vmtest, is the daemon's forward
//     target; its outbox carries the loops across the kills), checked by
//     export at the end; skipped under -short, where the server is not
//     built;
//   - the daemon never panicked (its stderr).
//
// Short by default (a few runs, for CI); HYSTD_CAMPAIGN=long runs the long
// form (190 runs, up to 16 injection times each, 45 % of them killed;
// floors ≥ 100 runs, ≥ 1000 faults, ≥ 50 kills; about 20 minutes on two
// cores). HYSTD_CAMPAIGN_SEED fixes the random draws. The campaign runs in
// real time with short recipes; campaignClock is where a simulated clock
// goes once the bench and the daemon share one.
//
// Figures of a long run are printed at the end (t.Log) and, with
// HYSTD_CAMPAIGN_REPORT=FILE, written as JSON to FILE. HYSTD_CAMPAIGN_LOGS=DIR
// keeps the daemon child's logs (serve-NNN.log, one per start) in DIR.
func TestCampaignFaultsAndKills(t *testing.T) {
	if _, err := exec.LookPath("go"); err != nil {
		t.Skip("the campaign builds hystd with the go command, which is not on PATH")
	}
	long := os.Getenv("HYSTD_CAMPAIGN") == "long"
	plan := campaignPlan{runs: 5, maxFaults: 4, burst: 2, killP: 0.4}
	if long {
		plan = campaignPlan{runs: 190, maxFaults: 16, burst: 4, killP: 0.45, lightP: 0.3}
	}
	if s := os.Getenv("HYSTD_CAMPAIGN_RUNS"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 1 {
			t.Fatalf("HYSTD_CAMPAIGN_RUNS=%q: want a positive number of runs", s)
		}
		plan.runs = n
	}
	seed := uint64(time.Now().UnixNano())
	if s := os.Getenv("HYSTD_CAMPAIGN_SEED"); s != "" {
		v, err := strconv.ParseUint(s, 10, 64)
		if err != nil {
			t.Fatalf("HYSTD_CAMPAIGN_SEED: %v", err)
		}
		seed = v
	}
	t.Logf("campaign seed %d (HYSTD_CAMPAIGN_SEED=%d repeats the draws)", seed, seed)
	c := newCampaign(t, seed)
	c.report = os.Getenv("HYSTD_CAMPAIGN_REPORT")
	c.run(plan)
	rep, _ := json.MarshalIndent(c.fig, "", "  ")
	t.Logf("campaign figures:\n%s", rep)
	if f := os.Getenv("HYSTD_CAMPAIGN_REPORT"); f != "" {
		if err := os.WriteFile(f, rep, 0o644); err != nil {
			t.Error(err)
		}
	}
	if long && (c.fig.Runs < 100 || c.fig.FaultsTotal < 1000 || c.fig.Kills < 50) {
		t.Errorf("long campaign below its floor: %d runs, %d faults, %d kills", c.fig.Runs, c.fig.FaultsTotal, c.fig.Kills)
	}
}

type campaignPlan struct {
	runs      int
	maxFaults int     // injection times per run, drawn uniformly in [1, maxFaults]
	burst     int     // faults per injection time, drawn uniformly in [1, burst]
	killP     float64 // chance a run is ended by kill -9
	lightP    float64 // chance a run takes only 1–2 single faults (most such runs finish: loops to check)
}

// campaignFigures is what a campaign reports.
type campaignFigures struct {
	Seed             uint64         `json:"seed"`
	Runs             int            `json:"runs"`
	States           map[string]int `json:"states"`
	FaultsByKind     map[string]int `json:"faults_by_kind"`
	FaultsTotal      int            `json:"faults_total"`
	FaultsInRuns     int            `json:"faults_in_runs"`                    // fired while a run was under way, not killed
	FaultsInvisible  int            `json:"faults_invisible"`                  // of those, without evidence in the run (garble excepted)
	GarbleInvisible  int            `json:"garble_invisible"`                  // garbles with no evidence (a flipped letter in a message text parses)
	FaultsKilledRuns int            `json:"faults_killed_runs"`                // fired in runs ended by kill -9 (not checked)
	FaultsBetween    int            `json:"faults_between_runs"`               // fired after a run's ending: at halts, opens, start-ups
	ErrorsCarried    int            `json:"errors_found_in_a_later_run"`       // error faults fired after a run's last poll, named by the next run's open
	ErrorsDestroyed  int            `json:"errors_destroyed_with_their_reply"` // named by no run: a drop or garble spoiled the reply that carried the entry (Bench.DestroyedErrors)
	TripsCarried     int            `json:"trips_named_by_a_later_run"`        // trips fired during a run's ending, named by the next run
	NoEffect         int            `json:"hangups_outside_runs"`              // hangups before a run opened its ports or after its ending
	Kills            int            `json:"kills"`
	Restarts         int            `json:"restarts"`
	Loops            int            `json:"loops"`
	Points           int            `json:"raw_samples"`
	Energised        int            `json:"energised_endings"`
	Shifted          int            `json:"shifted_samples"`
	Duplicates       int            `json:"duplicate_loops"`
	MissingLoops     int            `json:"finished_runs_without_loop"`
	Panics           int            `json:"panics"`
	// Forwarding, by export from the database at the end: each value of
	// each stored loop's points (influx.Points) expected once.
	ForwardChecked    bool   `json:"forwarding_checked"`
	ForwardValues     int    `json:"forward_values_expected"`
	ForwardedOnce     int    `json:"forward_values_arrived_once"`
	ForwardMissing    int    `json:"forward_values_missing"`
	ForwardDuplicated int    `json:"forward_values_duplicated"`
	ForwardUnexpected int    `json:"forward_values_unexpected"`
	Elapsed           string `json:"elapsed"`
}

type injection struct {
	kind string
	at   time.Time
}

type campaign struct {
	t      *testing.T
	rng    *rand.Rand
	bench  *sim.Bench
	dir    string
	bin    string
	addr   string
	token  string
	db     string
	vm     *vmtest.Server // the forward target; nil under -short
	child  *exec.Cmd
	exited chan error
	logs   []string
	fig    campaignFigures
	report string // written after every run when not ""
}

// campaignClock is the campaign's time source: the wall clock, as the
// bench and the daemon run in real time for now.
var campaignClock = struct {
	Now   func() time.Time
	Sleep func(time.Duration)
}{time.Now, time.Sleep}

// invisible reports a fault that left no trace in any run's reason or
// events: it fails the test, in every form.
func (c *campaign) invisible(format string, args ...any) {
	c.t.Helper()
	c.t.Errorf("INVISIBLE FAULT: "+format, args...)
}

func newCampaign(t *testing.T, seed uint64) *campaign {
	c := &campaign{t: t, rng: rand.New(rand.NewPCG(seed, 0xca)), dir: t.TempDir(), token: "campaign-token-0123456789"}
	c.fig = campaignFigures{Seed: seed, States: map[string]int{}, FaultsByKind: map[string]int{}}
	c.bin = filepath.Join(c.dir, "hystd")
	build := exec.Command("go", "build", "-o", c.bin, ".")
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	cfg, err := sim.DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	cfg.Seed = seed
	b, err := sim.Start(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	c.bench = b
	links := filepath.Join(c.dir, "ports")
	if _, err := sim.MakeLinks(links, b.Ports()); err != nil {
		t.Fatal(err)
	}
	ports := map[string]string{}
	for _, role := range sim.LinkNames {
		ports[role] = filepath.Join(links, role)
	}
	fx, sp := configtest.RingBytes(t, ports)
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	c.addr = ln.Addr().String()
	ln.Close()
	c.db = filepath.Join(c.dir, "hystd.db")
	write := func(name, data string) {
		if err := os.WriteFile(filepath.Join(c.dir, name), []byte(data), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	write("fixture.yaml", string(fx))
	write("specimen.yaml", string(sp))
	write("token", c.token+"\n")
	forward := ""
	if !testing.Short() {
		c.vm = vmtest.Start(t)
		forward = fmt.Sprintf("influx: {url: %q, bucket: campaign, token_env: HYSTD_CAMPAIGN_NO_TOKEN, min_backoff: 200ms, max_backoff: 2s, poll_interval: 200ms}\n", c.vm.URL)
	}
	write("daemon.yaml", fmt.Sprintf("kind: daemon\nhttp: {addr: %q, token_file: token}\nstore: {path: %s}\nlog: {level: info}\n%sfixtures:\n  - {fixture: fixture.yaml, specimen: specimen.yaml}\n", c.addr, c.db, forward))
	if err := os.Mkdir(filepath.Join(c.dir, "locks"), 0o755); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(c.stop)
	return c
}

// start starts `hystd serve` and waits for /healthz; the daemon halts the
// supply before it listens, so the truth must be safe at once.
func (c *campaign) start(why string) {
	t := c.t
	dir := c.dir
	if d := os.Getenv("HYSTD_CAMPAIGN_LOGS"); d != "" {
		dir = d // kept after the test, for a diagnosis
	}
	logf := filepath.Join(dir, fmt.Sprintf("serve-%03d.log", len(c.logs)))
	f, err := os.Create(logf)
	if err != nil {
		t.Fatal(err)
	}
	c.logs = append(c.logs, logf)
	cmd := exec.Command(c.bin, "serve", "--config", filepath.Join(c.dir, "daemon.yaml"))
	cmd.Stdout, cmd.Stderr = f, f
	cmd.Env = append(os.Environ(), link.LockDirEnv+"="+filepath.Join(c.dir, "locks"))
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	c.child, c.exited = cmd, make(chan error, 1)
	go func() { c.exited <- cmd.Wait(); f.Close() }()
	deadline := campaignClock.Now().Add(60 * time.Second)
	for {
		resp, err := http.Get("http://" + c.addr + "/healthz")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				break
			}
		}
		select {
		case err := <-c.exited:
			b, _ := os.ReadFile(logf)
			t.Fatalf("hystd serve exited at %s: %v\n%s", why, err, b)
		default:
		}
		if campaignClock.Now().After(deadline) {
			b, _ := os.ReadFile(logf)
			t.Fatalf("hystd serve not healthy within 60 s at %s\n%s", why, b)
		}
		campaignClock.Sleep(20 * time.Millisecond)
	}
	c.assertSafe(why, 0)
}

// kill ends the daemon with SIGKILL, as a crash or an OOM kill would.
func (c *campaign) kill() {
	_ = c.child.Process.Signal(syscall.SIGKILL)
	<-c.exited
	c.fig.Kills++
}

func (c *campaign) stop() {
	if c.child == nil || c.child.ProcessState != nil {
		return
	}
	_ = c.child.Process.Signal(syscall.SIGTERM)
	select {
	case <-c.exited:
	case <-time.After(60 * time.Second):
		c.child.Process.Kill()
		<-c.exited
		c.t.Error("hystd serve did not stop within 60 s of SIGTERM")
	}
}

// haltTime bounds how long after an ending (or a start) the truth may take
// to show zero: the ending is recorded after the halt, and Serve halts
// before it listens, so only the bench's own stepping remains.
const haltTime = 500 * time.Millisecond

func (c *campaign) assertSafe(when string, within time.Duration) {
	deadline := campaignClock.Now().Add(within)
	for {
		tr := c.bench.Truth()
		if math.Abs(float64(tr.I)) < 5e-3 && !tr.Output {
			return
		}
		if campaignClock.Now().After(deadline) {
			c.fig.Energised++
			c.t.Errorf("%s: the bench reads %.4g A, output on = %v", when, float64(tr.I), tr.Output)
			return
		}
		campaignClock.Sleep(10 * time.Millisecond)
	}
}

func (c *campaign) submit(recipe string) string {
	req, _ := http.NewRequest(http.MethodPost, "http://"+c.addr+"/api/v1/runs", strings.NewReader(recipe))
	req.Header.Set("Authorization", "Bearer "+c.token)
	req.Header.Set("Content-Type", "application/yaml")
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		c.t.Fatalf("submit: %v", err)
	}
	defer resp.Body.Close()
	var out struct {
		RunID string `json:"run_id"`
		Error string `json:"error"`
	}
	_ = json.NewDecoder(resp.Body).Decode(&out)
	if resp.StatusCode != http.StatusAccepted || out.RunID == "" {
		c.t.Fatalf("submit: %s %+v", resp.Status, out)
	}
	return out.RunID
}

// stored reads a run, its events and its loops (with raw samples) from
// the store the daemon writes (SQLite in WAL mode: a second reader is fine).
func (c *campaign) stored(id string) (record.Run, []record.Event, []record.Loop, error) {
	ctx := context.Background()
	st, err := store.Open(ctx, c.db)
	if err != nil {
		return record.Run{}, nil, nil, err
	}
	defer st.Close()
	r, err := st.Run(ctx, id)
	if err != nil {
		return r, nil, nil, err
	}
	evs, _ := st.Events(ctx, id)
	ls, err := st.Loops(ctx, id)
	if err != nil {
		return r, evs, nil, err
	}
	var full []record.Loop
	for _, l := range ls {
		fl, err := st.Loop(ctx, id, l.N)
		if err != nil {
			return r, evs, nil, err
		}
		full = append(full, fl)
	}
	return r, evs, full, nil
}

func ended(s record.State) bool {
	return s == record.Finished || s == record.Failed || s == record.Aborted
}

// campaignLoop steps the field by 200 A/m per sample (see shiftedSamples):
// 10 points over ±500 A/m at 300 A/m/s, about 8 s a run; slow enough that
// the jump after a 1.5 s stall (450 A/m, 0.32 A) settles within the
// supply's 4 ms settle time at its 100 A/s slew.
const campaignLoop = `kind: recipe
name: campaign-loop
steps:
  - record_loop: {amplitude: 500 A/m, rate: 300 A/m/s, points: 10, hold: 300ms}
`

// faultKinds are drawn with these weights: mostly faults a run survives
// (a reply lost, late or garbled is read again), some that end it.
var faultKinds = []struct {
	kind   string
	weight float64
}{{sim.FaultDrop, 0.35}, {sim.FaultDelay, 0.2}, {sim.FaultGarble, 0.35}, {sim.FaultError, 0.04}, {sim.FaultHangup, 0.03}, {sim.FaultTrip, 0.03}}

var faultRoles = []string{instr.RoleSupply, instr.RoleIntegrator, instr.RoleFieldMeter, instr.RoleThermometer}

func (c *campaign) randomFault(n int) sim.Fault {
	x := c.rng.Float64()
	kind := faultKinds[len(faultKinds)-1].kind
	for _, k := range faultKinds {
		if x < k.weight {
			kind = k.kind
			break
		}
		x -= k.weight
	}
	f := sim.Fault{Kind: kind, Role: faultRoles[c.rng.IntN(len(faultRoles))]}
	switch kind {
	case sim.FaultTrip:
		f.Role = instr.RoleSupply
	case sim.FaultDelay:
		f.Delay = configs.Duration(600*time.Millisecond + time.Duration(c.rng.IntN(300))*time.Millisecond)
	case sim.FaultError:
		f.Code, f.Message = -300-c.rng.IntN(50), fmt.Sprintf("campaign fault %d", n)
	}
	return f
}

// evidence is what a run's reason and events show for a fault of a kind
// that fired while it was under way.
var evidence = map[string][]string{
	sim.FaultDrop:   {"read again", "no reply", "timeout", "resynchronis", "out of step", "could not be opened"},
	sim.FaultDelay:  {"read again", "no reply", "timeout", "resynchronis", "out of step", "could not be opened"},
	sim.FaultGarble: {"read again", "out of step", "does not", "not a number", "resynchronis", "could not be opened", "timeout"},
	sim.FaultHangup: {"lost communication", "disconnected", "reconnect", "could not be opened"},
	sim.FaultError:  {"campaign fault"},
	sim.FaultTrip:   {"tripped"},
}

func (c *campaign) run(plan campaignPlan) {
	t := c.t
	t0 := campaignClock.Now()
	c.start("first start")
	c.fig.Restarts = 0
	loopsSeen := map[string]bool{}
	// Error faults carry a unique message; one not named by the run it
	// fired in (pushed after that run's last poll) must be named by the
	// next run that starts (its open reads the queue before *CLS). A trip
	// not named by its run is left latched for the next run to name.
	type pendingErr struct {
		msg string
		run int
	}
	var pendErrs []pendingErr
	pendTrips := 0
	// The last run takes no faults and is not killed: it reads what the
	// runs before it left pending.
	for k := 0; k <= plan.runs; k++ { // on after a failure: the figures count every run
		sweepUp := k == plan.runs
		if c.bench.Truth().Tripped && pendTrips == 0 {
			c.clearTrip()
		}
		before := c.bench.Injected()
		id := c.submit(campaignLoop)
		c.fig.Runs++
		nf, burst := 1+c.rng.IntN(plan.maxFaults), plan.burst
		if c.rng.Float64() < plan.lightP {
			nf, burst = 1+c.rng.IntN(2), 1
		}
		if sweepUp {
			nf = 0
		}
		killAt := time.Duration(-1)
		if !sweepUp && c.rng.Float64() < plan.killP {
			// Mostly after the open, while the winding carries current.
			killAt = time.Duration(1200+c.rng.IntN(4000)) * time.Millisecond
		}
		offsets := make([]time.Duration, nf)
		for i := range offsets {
			// Mostly after the open: faults spent on the open's *IDN? fail
			// the run as "wrong instrument" and little else is tried.
			offsets[i] = time.Duration(700+c.rng.IntN(6500)) * time.Millisecond
		}
		sort.Slice(offsets, func(i, j int) bool { return offsets[i] < offsets[j] })
		start := campaignClock.Now()
		killed := false
		var endInj map[string]int // faults fired when the ending was first seen
		var immediate []injection // error, hangup, trip: fired when injected
		state := func() record.State {
			r, _, _, err := c.stored(id)
			if err != nil {
				return ""
			}
			return r.State
		}
		for i, off := range offsets {
			if killAt >= 0 && off > killAt {
				break
			}
			campaignClock.Sleep(time.Until(start.Add(off)))
			if ended(state()) {
				// No faults between runs: armed on an idle line they would
				// fail the next run at its open, and the next, and no run
				// would ever finish (seen: 170 runs, none finished).
				endInj = c.bench.Injected()
				break
			}
			for j := range 1 + c.rng.IntN(burst) {
				f := c.randomFault(k*1000 + i*10 + j)
				at := campaignClock.Now()
				if err := c.bench.Inject(f); err != nil {
					t.Fatalf("inject %+v: %v", f, err)
				}
				switch f.Kind {
				case sim.FaultHangup:
					immediate = append(immediate, injection{f.Kind, at})
				case sim.FaultError:
					pendErrs = append(pendErrs, pendingErr{f.Message, k})
				}
			}
		}
		if killAt >= 0 {
			campaignClock.Sleep(time.Until(start.Add(killAt)))
			if !ended(state()) {
				c.kill()
				killed = true
				c.fig.Restarts++
				c.start(fmt.Sprintf("restart after kill -9 in run %d", k))
			}
		}
		var r record.Run
		var evs []record.Event
		var loops []record.Loop
		deadline := campaignClock.Now().Add(90 * time.Second)
		for {
			var err error
			inj := c.bench.Injected()
			r, evs, loops, err = c.stored(id)
			if err == nil && ended(r.State) {
				if endInj == nil {
					endInj = inj
				}
				break
			}
			if campaignClock.Now().After(deadline) {
				t.Fatalf("run %d (%s) did not end within 90 s: %s", k, id, r.State)
			}
			campaignClock.Sleep(50 * time.Millisecond)
		}
		c.assertSafe(fmt.Sprintf("after run %d (%s %s: %s)", k, id, r.State, r.Reason), haltTime)
		after := c.bench.Injected()
		if c.report != "" {
			c.fig.Elapsed = campaignClock.Now().Sub(t0).Round(time.Second).String()
			rep, _ := json.MarshalIndent(c.fig, "", "  ")
			_ = os.WriteFile(c.report, rep, 0o644)
		}
		// Faults that act when injected count for the run only when
		// injected before its ending (less the time the ending takes to
		// be stored and seen); reply faults count when they fired before
		// the ending was seen.
		inRun := map[string]int{}
		for kind := range after {
			inRun[kind] = endInj[kind] - before[kind]
		}
		for _, kind := range []string{sim.FaultError, sim.FaultHangup, sim.FaultTrip} {
			inRun[kind] = 0
		}
		for _, in := range immediate {
			// A hangup before the run opened its ports or after its
			// ending finds no process on the line: nothing to observe.
			// (vhangup reaches only open descriptors.)
			if !r.Started.IsZero() && !in.at.Before(r.Started) && in.at.Before(r.Ended.Add(-200*time.Millisecond)) {
				inRun[in.kind]++
			} else {
				c.fig.NoEffect++
			}
		}
		c.fig.States[string(r.State)]++
		fired := map[string]int{}
		for kind, n := range after {
			if d := n - before[kind]; d > 0 {
				fired[kind] = d
			}
		}
		t.Logf("run %d %s: %s (killed %v) faults %v: %.300s", k, id, r.State, killed, fired, r.Reason)
		// Killed under way: failed, interrupted; killed while still queued
		// (the open not begun): aborted, never started.
		if killed && !(r.State == record.Failed && strings.Contains(r.Reason, "interrupted")) &&
			!(r.State == record.Aborted && strings.Contains(r.Reason, "before the run started")) {
			t.Errorf("run %d killed: recorded %s %q, want failed, interrupted (or aborted, never started)", k, r.State, r.Reason)
		}
		// Loops: once each; a finished run has its one loop; no channel
		// out of step.
		for _, l := range loops {
			key := fmt.Sprintf("%s/%d", id, l.N)
			if loopsSeen[key] {
				c.fig.Duplicates++
				t.Errorf("loop %s stored twice", key)
			}
			loopsSeen[key] = true
			c.fig.Loops++
			c.fig.Points += len(l.Raw)
			if nI, nB := fixturetest.ShiftedSamples(l.Raw, 0.002, 1e-4); nI+nB > 0 {
				c.fig.Shifted += nI + nB
				t.Errorf("run %d loop %d: %d samples with the current, %d with the field out of step", k, l.N, nI, nB)
			}
		}
		if r.State == record.Finished && len(loops) != 1 {
			c.fig.MissingLoops++
			t.Errorf("run %d finished with %d loops", k, len(loops))
		}
		// Faults that fired while the run was under way.
		text := r.Reason
		for _, e := range evs {
			text += "\n" + e.Text
		}
		// Errors, each by its message: in this run, or (pushed after its
		// last poll) in the next run that starts; a kill loses what the
		// killed process read and had not stored yet.
		var still []pendingErr
		for _, pe := range pendErrs {
			switch {
			case killed:
				c.fig.FaultsKilledRuns++
			case containsNear(text, pe.msg):
				if pe.run == k {
					c.fig.FaultsInRuns++
				} else {
					c.fig.ErrorsCarried++
				}
			case pe.run == k || r.Started.IsZero():
				still = append(still, pe) // for the next run that starts
			case c.destroyed(pe.msg):
				c.fig.ErrorsDestroyed++
			default:
				c.fig.FaultsInvisible++
				c.invisible("run %d (%s %s): error %q fired in run %d and was named by neither run:\n%s", k, id, r.State, pe.msg, pe.run, text)
			}
		}
		pendErrs = still
		// Trips: named by this run, or left latched for the next.
		trips := after[sim.FaultTrip] - before[sim.FaultTrip]
		switch named := strings.Contains(text, "tripped"); {
		case killed:
			c.fig.FaultsKilledRuns += trips + pendTrips
			pendTrips = 0
		case named:
			c.fig.FaultsInRuns += trips
			c.fig.TripsCarried += pendTrips
			pendTrips = 0
		case pendTrips > 0 && !r.Started.IsZero():
			c.fig.FaultsInvisible += pendTrips
			c.invisible("run %d (%s %s): a trip left latched by the run before was not named:\n%s", k, id, r.State, text)
			pendTrips = trips
		default:
			pendTrips += trips
		}
		if pendTrips > 0 && !c.bench.Truth().Tripped {
			c.fig.FaultsInvisible += pendTrips
			c.invisible("run %d (%s %s): %d trip(s) fired, not named, and the supply is no longer tripped (cleared by whom?):\n%s", k, id, r.State, pendTrips, text)
			pendTrips = 0
		}
		for kind, n := range after {
			c.fig.FaultsByKind[kind] += n - before[kind]
			c.fig.FaultsTotal += n - before[kind]
			d := inRun[kind]
			if kind != sim.FaultError && kind != sim.FaultTrip {
				c.fig.FaultsBetween += n - before[kind] - d
			}
			if d <= 0 {
				continue
			}
			if killed {
				c.fig.FaultsKilledRuns += d
				continue
			}
			c.fig.FaultsInRuns += d
			seen := false
			for _, s := range evidence[kind] {
				seen = seen || strings.Contains(text, s)
			}
			switch {
			case seen:
			case kind == sim.FaultGarble:
				c.fig.GarbleInvisible += d
			default:
				c.fig.FaultsInvisible += d
				c.invisible("run %d (%s %s): %d %s fault(s) fired and left no trace in its reason or events:\n%s", k, id, r.State, d, kind, text)
			}
		}
	}
	for _, pe := range pendErrs {
		if c.destroyed(pe.msg) {
			c.fig.ErrorsDestroyed++
			continue
		}
		c.fig.FaultsInvisible++
		c.invisible("error %q fired in run %d and was named by no run up to the last", pe.msg, pe.run)
	}
	if pendTrips > 0 {
		c.fig.FaultsInvisible += pendTrips
		c.invisible("%d trip(s) named by no run up to the last", pendTrips)
	}
	c.checkForwarded(loopsSeen)
	c.stop()
	c.assertSafe("after SIGTERM", haltTime)
	for _, l := range c.logs {
		b, _ := os.ReadFile(l)
		if bytes.Contains(b, []byte("panic:")) || bytes.Contains(b, []byte("goroutine ")) {
			c.fig.Panics++
			t.Errorf("%s shows a panic:\n%s", l, b)
		}
	}
	c.fig.Elapsed = campaignClock.Now().Sub(t0).Round(time.Second).String()
}

// clearTrip is what the operator does after a trip (the profile's
// trip_clear): *RST to the supply, once the winding has cooled. The daemon
// is idle and holds no port between runs.
func (c *campaign) clearTrip() {
	f, err := os.OpenFile(c.bench.Ports()[instr.RoleSupply], os.O_RDWR, 0)
	if err != nil {
		c.t.Fatal(err)
	}
	defer f.Close()
	f.WriteString("*RST\n")
	deadline := campaignClock.Now().Add(30 * time.Second)
	for c.bench.Truth().Tripped {
		if campaignClock.Now().After(deadline) {
			c.t.Fatal("trip not cleared by *RST within 30 s")
		}
		campaignClock.Sleep(200 * time.Millisecond)
		f.WriteString("*RST\n")
	}
	// The replies to nothing stay on the line: the next open discards them.
}

// destroyed reports whether the error with message msg was carried by a
// reply that a drop or garble spoiled beyond reading (the bench's truth):
// the instrument removed it from its queue and nobody can read it; what
// a run can name is the lost reply, checked as that fault's evidence.
func (c *campaign) destroyed(msg string) bool {
	return slices.Contains(c.bench.DestroyedErrors(), msg)
}

// containsNear reports whether text holds msg with at most one character
// changed: a garble fault on the error query's reply flips one letter, and
// a flipped letter inside the message still parses.
func containsNear(text, msg string) bool {
	if strings.Contains(text, msg) {
		return true
	}
	for i := 0; i+len(msg) <= len(text); i++ {
		diff := 0
		for j := 0; j < len(msg) && diff < 2; j++ {
			if text[i+j] != msg[j] {
				diff++
			}
		}
		if diff < 2 {
			return true
		}
	}
	return false
}

// forwardWithin bounds the wait, after the last run, for the daemon's
// forwarder to deliver what its outbox still holds.
const forwardWithin = 2 * time.Minute

// checkForwarded reads back from the time-series database every value of
// the points of every stored loop (loops: "RUN/N" keys) and requires each
// exactly once: none lost across the kills, none sent twice by an outbox
// that did not know a delivery had been made.
func (c *campaign) checkForwarded(loops map[string]bool) {
	t := c.t
	if c.vm == nil {
		t.Log("forwarding not checked: the database server is not started under -short")
		return
	}
	ctx := context.Background()
	want := map[string]float64{}
	runs := map[string]bool{}
	for key := range loops {
		id := key[:strings.LastIndex(key, "/")]
		if runs[id] {
			continue
		}
		runs[id] = true
		r, _, ls, err := c.stored(id)
		if err != nil {
			t.Fatalf("forwarding check: run %s: %v", id, err)
		}
		for _, l := range ls {
			pts, err := influx.Points(r, l)
			if err != nil {
				t.Fatalf("forwarding check: run %s loop %d: %v", id, l.N, err)
			}
			if err := vmtest.AddPoints(want, pts); err != nil {
				t.Fatalf("forwarding check: run %s loop %d: %v", id, l.N, err)
			}
		}
	}
	c.fig.ForwardChecked, c.fig.ForwardValues = true, len(want)
	if len(runs) == 0 {
		t.Error("forwarding check: no run stored a loop")
		return
	}
	var ids []string
	for id := range runs {
		ids = append(ids, regexp.QuoteMeta(id))
	}
	sort.Strings(ids)
	match := fmt.Sprintf(`{__name__=~"hyst_.*",run=~"%s"}`, strings.Join(ids, "|"))
	var series []vmtest.Series
	deadline := campaignClock.Now().Add(forwardWithin)
	for {
		var err error
		series, err = c.vm.Export(ctx, match)
		if err != nil {
			t.Fatalf("forwarding check: export: %v", err)
		}
		if vmtest.Count(series) >= len(want) || campaignClock.Now().After(deadline) {
			break
		}
		campaignClock.Sleep(500 * time.Millisecond)
	}
	seen := map[string]int{}
	for _, se := range series {
		for _, ms := range se.Timestamps {
			k := vmtest.Key(se.Metric["__name__"], se.Metric, ms)
			seen[k]++
			if _, ok := want[k]; !ok {
				if c.fig.ForwardUnexpected++; c.fig.ForwardUnexpected <= 5 {
					t.Errorf("forwarding: %s arrived, no stored loop has it", k)
				}
			}
		}
	}
	for k := range want {
		switch n := seen[k]; {
		case n == 1:
			c.fig.ForwardedOnce++
		case n == 0:
			if c.fig.ForwardMissing++; c.fig.ForwardMissing <= 5 {
				t.Errorf("forwarding: %s never arrived", k)
			}
		default:
			if c.fig.ForwardDuplicated++; c.fig.ForwardDuplicated <= 5 {
				t.Errorf("forwarding: %s arrived %d times", k, n)
			}
		}
	}
	if c.fig.ForwardMissing+c.fig.ForwardDuplicated+c.fig.ForwardUnexpected > 0 {
		t.Errorf("forwarding: of %d values of %d stored loops, %d arrived once, %d never, %d more than once; %d unexpected",
			len(want), len(loops), c.fig.ForwardedOnce, c.fig.ForwardMissing, c.fig.ForwardDuplicated, c.fig.ForwardUnexpected)
	}
}
