package api_test

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"hystd/acq/api"
	"hystd/acq/config/configtest"
	"hystd/acq/daemon"
	"hystd/acq/live"
	"hystd/acq/record"
	"hystd/acq/store/memstore"
	"hystd/calib/units"
	"hystd/drivers/clock"
	"hystd/drivers/sim"
)

const browserToken = "bench-key-7f3a-91c2d0"

// findChromium returns the Chromium binary (HYSTD_CHROMIUM, or chromium /
// chromium-browser on PATH). Without one the test is skipped with a clear
// message, and fails when CI=true, because CI installs Debian's package.
func findChromium(t *testing.T) string {
	t.Helper()
	cands := []string{os.Getenv("HYSTD_CHROMIUM"), "chromium", "chromium-browser"}
	for _, c := range cands {
		if c == "" {
			continue
		}
		if p, err := exec.LookPath(c); err == nil {
			return p
		}
	}
	msg := "Chromium not found (set HYSTD_CHROMIUM or install Debian's chromium package: apt-get install -y chromium); browser test not run"
	if os.Getenv("CI") == "true" {
		t.Fatal(msg)
	}
	t.Skip(msg)
	return ""
}

var updateShots = flag.Bool("update", false, "write the browser test's screenshots to testdata/screenshots (committed)")

// screenshotDir is where the browser test writes its PNG screenshots:
// $HYSTD_SCREENSHOTS, testdata/screenshots in this package with -update,
// else a temporary folder (the checkout stays clean).
func screenshotDir(t *testing.T) string {
	d := os.Getenv("HYSTD_SCREENSHOTS")
	switch {
	case d != "":
	case *updateShots:
		d = filepath.Join("testdata", "screenshots")
	default:
		d = t.TempDir()
	}
	if err := os.MkdirAll(d, 0o755); err != nil {
		t.Fatal(err)
	}
	return d
}

type logBuf struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *logBuf) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *logBuf) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// benchServer is `hystd serve` on the simulated bench (real ptys, real
// serial drivers, real engine and SQLite store) with this package's API.
type benchServer struct {
	base    string
	fixture string
	bench   *sim.Bench
	clock   *clock.Sim // the bench's, the drivers' and the engine's time
	logs    *logBuf
	dir     string         // the config's folder
	sigs    chan os.Signal // the daemon's signals (SIGHUP reloads)
}

// pace joins the test to the bench's simulated time as a second actor that
// lets it move at most step per tick of real time, so that a live sweep
// can be watched; stop freezes simulated time where it is (the test stays
// an actor, awake) until leave.
func (bs *benchServer) pace(step, tick time.Duration) (stop, leave func()) {
	leave = bs.clock.Join()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() {
		defer close(done)
		for ctx.Err() == nil {
			clock.Sleep(ctx, bs.clock, step)
			time.Sleep(tick)
		}
	}()
	return func() { cancel(); <-done }, leave
}

func startBenchServer(t *testing.T) *benchServer {
	t.Helper()
	return startServer(t, serverSetup{simClock: true})
}

// serverSetup is what a test's daemon has besides the ring bench's
// fixture and specimen (fixture.yaml, specimen.yaml) and the token.
type serverSetup struct {
	// simClock puts the bench, the drivers and the engine on one
	// simulated clock (benchServer.clock); otherwise they run in real time.
	simClock bool
	// files returns more files to write in the config's folder (name →
	// content; a name may be in a sub-folder), given the specimen file.
	files func(t *testing.T, specimen []byte) map[string][]byte
	// config is more lines of the daemon config.
	config string
	// users, when set, is the content of users.yaml, named as the
	// config's http.users_file.
	users string
}

// startServer starts `hystd serve` on the simulated ring bench as s says;
// the test's end stops both.
func startServer(t *testing.T, s serverSetup) *benchServer {
	t.Helper()
	cfg, err := sim.DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	var clk *clock.Sim
	var opts []sim.Option
	if s.simClock {
		clk = clock.NewSim(time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC))
		opts = append(opts, sim.WithClock(clk))
	}
	b, err := sim.Start(ctx, cfg, opts...)
	if err != nil {
		cancel()
		t.Fatal(err)
	}
	t.Cleanup(func() { cancel(); b.Close() })
	dir := t.TempDir()
	fx, sp := configtest.RingBytes(t, b.Ports())
	write := func(name string, data []byte) {
		if err := os.MkdirAll(filepath.Dir(filepath.Join(dir, name)), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, name), data, 0o600); err != nil {
			t.Fatal(err)
		}
	}
	write("fixture.yaml", fx)
	write("specimen.yaml", sp)
	if s.files != nil {
		for name, data := range s.files(t, sp) {
			write(name, data)
		}
	}
	write("token", []byte(browserToken+"\n"))
	users := ""
	if s.users != "" {
		write("users.yaml", []byte(s.users))
		users = ", users_file: users.yaml"
	}
	write("daemon.yaml", []byte(fmt.Sprintf(`kind: daemon
http: {addr: "127.0.0.1:0", token_file: %s%s}
store: {path: %s}
log: {level: info}
%sfixtures:
  - {fixture: fixture.yaml, specimen: specimen.yaml}
`, filepath.Join(dir, "token"), users, filepath.Join(dir, "hystd.db"), s.config)))
	bs := &benchServer{bench: b, clock: clk, logs: &logBuf{}, dir: dir}
	for _, line := range strings.Split(string(fx), "\n") {
		if v, ok := strings.CutPrefix(line, "name:"); ok {
			bs.fixture = strings.TrimSpace(v)
		}
	}
	sigs := make(chan os.Signal, 1)
	bs.sigs = sigs
	done := make(chan error, 1)
	ready := make(chan string, 1)
	w := daemon.Wiring{
		Open:      daemon.FixtureOpener(slog.New(slog.NewTextHandler(bs.logs, nil))),
		Area:      daemon.SpecimenArea,
		Software:  "browser-test",
		Stderr:    bs.logs,
		Signals:   sigs,
		API:       api.ForDaemon,
		Listening: func(addr string) { ready <- addr },
	}
	if clk != nil {
		w.Open, w.Clock = daemon.FixtureOpenerClock(slog.New(slog.NewTextHandler(bs.logs, nil)), clk), clk
	}
	go func() { done <- daemon.Serve(ctx, filepath.Join(dir, "daemon.yaml"), w) }()
	select {
	case addr := <-ready:
		bs.base = "http://" + addr
	case err := <-done:
		t.Fatalf("serve: %v\n%s", err, bs.logs)
	case <-time.After(30 * time.Second):
		t.Fatalf("daemon not listening\n%s", bs.logs)
	}
	t.Cleanup(func() {
		sigs <- syscall.SIGTERM
		select {
		case <-done:
		case <-time.After(30 * time.Second):
			t.Error("daemon did not stop")
		}
		if t.Failed() {
			t.Logf("daemon log:\n%s", bs.logs)
		}
	})
	return bs
}

func (bs *benchServer) call(t *testing.T, method, path, token string, body string, out any) int {
	t.Helper()
	req, _ := http.NewRequest(method, bs.base+path, strings.NewReader(body))
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if body != "" {
		req.Header.Set("Content-Type", "application/yaml")
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	if out != nil {
		if err := json.Unmarshal(b, out); err != nil {
			t.Fatalf("%s %s: %v: %s", method, path, err, b)
		}
	}
	return resp.StatusCode
}

type runBody struct {
	Run struct {
		ID, State, Specimen string
	} `json:"run"`
}

// waitRun polls the API until the run is in one of the states (the
// deadline is real time, only to end a test that went wrong).
func (bs *benchServer) waitRun(t *testing.T, id string, d time.Duration, states ...string) string {
	t.Helper()
	deadline := time.Now().Add(d)
	for {
		var rb runBody
		bs.call(t, "GET", "/api/v1/runs/"+id, "", "", &rb)
		for _, s := range states {
			if rb.Run.State == s {
				return s
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("run %s still %q after %s, want %v", id, rb.Run.State, d, states)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

func loopRecipe(name string, amp, rate string, points int) string {
	return fmt.Sprintf(`kind: recipe
name: %s
steps:
  - record_loop: {amplitude: %s, rate: %s, points: %d, hold: 500ms}
`, name, amp, rate, points)
}

type browser struct {
	t   *testing.T
	ctx context.Context
	dir string
}

func newBrowser(t *testing.T, path string) *browser {
	opts := append(chromedp.DefaultExecAllocatorOptions[:],
		chromedp.ExecPath(path), chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU,
		chromedp.Flag("disable-quic", true), chromedp.Flag("no-first-run", true),
		chromedp.Flag("disable-background-networking", true), chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true), chromedp.UserDataDir(t.TempDir()), chromedp.WindowSize(1440, 960))
	actx, acancel := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancel := chromedp.NewContext(actx)
	t.Cleanup(func() { cancel(); acancel() })
	if _, err := chromedp.Run(ctx, chromedp.Evaluate[chromedp.Void](`1`)); err != nil {
		t.Fatalf("starting Chromium %s: %v", path, err)
	}
	return &browser{t: t, ctx: ctx, dir: screenshotDir(t)}
}

func (b *browser) do(steps ...chromedp.Action[chromedp.Void]) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 60*time.Second)
	defer cancel()
	if err := chromedp.Do(ctx, steps...); err != nil {
		b.t.Fatal(err)
	}
}

// js evaluates expr in the page.
func js[T any](b *browser, expr string) T {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 30*time.Second)
	defer cancel()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](expr))
	if err != nil {
		b.t.Fatalf("%s: %v", expr, err)
	}
	return v
}

// wait polls expr in the page until it is truthy.
func (b *browser) wait(what, expr string, d time.Duration) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, d+5*time.Second)
	defer cancel()
	if _, err := chromedp.Run(ctx, chromedp.Poll[chromedp.Void](expr, chromedp.WithPollingTimeout(d), chromedp.WithPollingInterval(50*time.Millisecond))); err != nil {
		b.t.Fatalf("waiting for %s (%s): %v", what, expr, err)
	}
}

func (b *browser) shot(name string) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 30*time.Second)
	defer cancel()
	png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	if err != nil {
		b.t.Fatal(err)
	}
	p := filepath.Join(b.dir, name)
	if err := os.WriteFile(p, png, 0o644); err != nil {
		b.t.Fatal(err)
	}
	b.t.Logf("screenshot %s (%d bytes)", p, len(png))
}

type loopBody struct {
	Loop struct {
		NPoints int `json:"n_points"`
		Points  struct {
			H []*float64 `json:"h_a_m"`
			B []*float64 `json:"b_t"`
		} `json:"points"`
	} `json:"loop"`
}

// plotVertices reads the first trace of the plot in sel back into data
// units (A/m and T) through the axis range the SVG carries.
func plotVertices(b *browser, sel string) (h, bb []float64, count int) {
	type res struct {
		Area, Xlo, Xhi, Ylo, Yhi, Xlabel, Ylabel string
		Points                                   []string
		Counts                                   []int
	}
	r := js[res](b, `(() => { const s = document.querySelector(`+strconv.Quote(sel+" svg")+`);
	  const ps = [...s.querySelectorAll("polyline.trace")];
	  return {Area: s.dataset.area, Xlo: s.dataset.xlo, Xhi: s.dataset.xhi, Ylo: s.dataset.ylo, Yhi: s.dataset.yhi,
	    Xlabel: s.querySelector(".xlabel").textContent, Ylabel: s.querySelector(".ylabel").textContent,
	    Points: ps.map(p => p.getAttribute("points")), Counts: ps.map(p => +p.dataset.count)}; })()`)
	f := func(s string) float64 { v, _ := strconv.ParseFloat(s, 64); return v }
	area := strings.Split(r.Area, ",")
	x0, x1, y0, y1 := f(area[0]), f(area[1]), f(area[2]), f(area[3])
	hMul := map[bool]float64{true: 1e3, false: 1}[strings.Contains(r.Xlabel, "kA/m")]
	yMul := map[bool]float64{true: 1e-3, false: 1}[strings.Contains(r.Ylabel, "mT")]
	for i, pts := range r.Points {
		count += r.Counts[i]
		for _, p := range strings.Fields(pts) {
			xs, ys, _ := strings.Cut(p, ",")
			h = append(h, (f(r.Xlo)+(f(xs)-x0)/(x1-x0)*(f(r.Xhi)-f(r.Xlo)))*hMul)
			bb = append(bb, (f(r.Ylo)+(y1-f(ys))/(y1-y0)*(f(r.Yhi)-f(r.Ylo)))*yMul)
		}
	}
	return h, bb, count
}

func TestBrowserReview(t *testing.T) {
	if testing.Short() {
		t.Skip("browser test on the simulated bench: skipped with -short")
	}
	chromium := findChromium(t)
	bs := startBenchServer(t)

	// Two finished runs on the bench, submitted through the API.
	var ids []string
	for i, amp := range []string{"500 A/m", "800 A/m"} {
		var res map[string]string
		if code := bs.call(t, "POST", "/api/v1/runs?fixture="+bs.fixture, browserToken, loopRecipe(fmt.Sprintf("short-%d", i+1), amp, "1 kA/m/s", 200), &res); code != 202 {
			t.Fatalf("submit: %d %v", code, res)
		}
		ids = append(ids, res["run_id"])
		bs.waitRun(t, res["run_id"], 60*time.Second, "finished")
	}
	var rb runBody
	bs.call(t, "GET", "/api/v1/runs/"+ids[0], "", "", &rb)
	specimen := rb.Run.Specimen

	b := newBrowser(t, chromium)
	b.do(chromedp.Navigate(bs.base + "/"))
	b.wait("page ready", `document.body.dataset.ready === "1"`, 20*time.Second)
	if v := js[string](b, `document.querySelector('#s-fixture').value`); v != bs.fixture {
		t.Errorf("start form fixture %q, want the daemon's only fixture %q", v, bs.fixture)
	}

	// 1. The finished runs appear in the runs list.
	for _, id := range ids {
		b.wait("run "+id+" listed", fmt.Sprintf(`!!document.querySelector('#runs-list li[data-run-id=%q][data-state="finished"]')`, id), 10*time.Second)
	}
	b.shot("1-runs-list.png")

	// 2. A loop: the plot holds the loop's points, each vertex on a point.
	var lb loopBody
	if code := bs.call(t, "GET", "/api/v1/runs/"+ids[1]+"/loops/1", "", "", &lb); code != 200 || lb.Loop.NPoints < 100 {
		t.Fatalf("loop from the API: %d, %d points", code, lb.Loop.NPoints)
	}
	finite := 0
	for i := range lb.Loop.Points.H {
		if lb.Loop.Points.H[i] != nil && lb.Loop.Points.B[i] != nil {
			finite++
		}
	}
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#runs-list li[data-run-id=%q]').click()`, ids[1])))
	b.wait("loop plot", fmt.Sprintf(`document.body.dataset.loop === %q`, ids[1]+"#1"), 15*time.Second)
	h, bv, count := plotVertices(b, "#loop-plot")
	if count != finite || len(h) != finite {
		t.Errorf("loop plot draws %d vertices (data-count %d), the loop has %d finite points", len(h), count, finite)
	}
	hspan, bspan := 0.0, 0.0
	for i := range lb.Loop.Points.H {
		if lb.Loop.Points.H[i] != nil {
			hspan = math.Max(hspan, math.Abs(*lb.Loop.Points.H[i]))
			bspan = math.Max(bspan, math.Abs(*lb.Loop.Points.B[i]))
		}
	}
	k := 0
	for i := range lb.Loop.Points.H {
		if lb.Loop.Points.H[i] == nil || lb.Loop.Points.B[i] == nil || k >= len(h) {
			continue
		}
		// Pixel coordinates carry two decimals: 0.01 px of a ~800 px axis.
		if math.Abs(h[k]-*lb.Loop.Points.H[i]) > 2e-4*hspan || math.Abs(bv[k]-*lb.Loop.Points.B[i]) > 2e-4*bspan {
			t.Fatalf("vertex %d at H %.3f, B %.5f; point is H %.3f, B %.5f", k, h[k], bv[k], *lb.Loop.Points.H[i], *lb.Loop.Points.B[i])
		}
		k++
	}
	nfig := js[int](b, `document.querySelectorAll('#figures tbody tr').length`)
	if nfig < 3 {
		t.Errorf("figures table has %d rows", nfig)
	}
	b.shot("2-loop.png")
	// The report links fetch the server-side drawing of the same loop.
	ctx, cancel := context.WithTimeout(b.ctx, 20*time.Second)
	ctype, err := chromedp.Run(ctx, chromedp.Evaluate[string](`fetch(document.querySelector('#dl-png').href).then(r => r.ok ? r.headers.get('Content-Type') : 'HTTP ' + r.status)`, chromedp.EvalAwaitPromise))
	cancel()
	if err != nil || ctype != "image/png" {
		t.Errorf("PNG link: %q %v", ctype, err)
	}
	// Zoom by dragging, then back to the whole loop.
	before := js[string](b, `document.querySelector('#loop-plot svg').dataset.xhi`)
	b.do(chromedp.Evaluate[chromedp.Void](`(() => { const s = document.querySelector('#loop-plot svg'), r = s.getBoundingClientRect();
	  const at = (fx, fy) => ({clientX: r.left + r.width * fx, clientY: r.top + r.height * fy, bubbles: true});
	  s.dispatchEvent(new MouseEvent('mousedown', at(0.45, 0.3))); s.dispatchEvent(new MouseEvent('mousemove', at(0.7, 0.6)));
	  s.dispatchEvent(new MouseEvent('mouseup', at(0.7, 0.6))); })()`))
	after := js[string](b, `document.querySelector('#loop-plot svg').dataset.xhi`)
	if after == before {
		t.Errorf("drag did not zoom (x max %s)", after)
	}
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#zoom-reset').click()`))
	if v := js[string](b, `document.querySelector('#loop-plot svg').dataset.xhi`); v != before {
		t.Errorf("reset gave x max %s, want %s", v, before)
	}
	// Second quadrant with its (BH)max marker, then CGS axes.
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#q2-toggle').click()`))
	b.wait("(BH)max marker", `!!document.querySelector('#loop-plot circle.bhmax') && document.querySelector('#loop-plot .marker-label').textContent.includes('(BH)max')`, 5*time.Second)
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#q2-toggle').click(); document.querySelector('#loop-toolbar [data-name="units"] [data-v="cgs"]').click()`))
	b.wait("CGS axis", `document.querySelector('#loop-plot .xlabel').textContent === 'H (Oe)'`, 5*time.Second)
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#loop-toolbar [data-name="units"] [data-v="si"]').click()`))

	// 3. Overlay of loops from two runs.
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#compare-add').click()`))
	// Picking another run withdraws the previous run's loop at once: no
	// "Add to compare", download link or figure of it stays while the new
	// one loads.
	withdrawn := js[bool](b, fmt.Sprintf(`(() => { document.querySelector('#runs-list li[data-run-id=%q]').click();
	  return document.querySelector('#compare-add').disabled && !document.querySelector('#dl-png').hasAttribute('href') &&
	    !document.querySelector('#figures tbody tr') && document.body.dataset.loop === undefined; })()`, ids[0]))
	if !withdrawn {
		t.Error("right after picking another run, the previous run's loop is still offered (compare, links or figures)")
	}
	b.wait("first run's loop", fmt.Sprintf(`document.body.dataset.loop === %q`, ids[0]+"#1"), 15*time.Second)
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#compare-add').click(); document.querySelector('[data-view="compare"]').click()`))
	b.wait("overlay of two runs", `new Set([...document.querySelectorAll('#compare-plot polyline.trace')].map(p => p.dataset.key)).size === 2`, 10*time.Second)
	keys := js[[]string](b, `[...new Set([...document.querySelectorAll('#compare-plot polyline.trace')].map(p => p.dataset.key))]`)
	for _, id := range ids {
		if !strings.Contains(strings.Join(keys, " "), id+"#1") {
			t.Errorf("overlay keys %v lack %s#1", keys, id)
		}
	}
	b.shot("3-overlay.png")

	// 4. Trend of HcB for the specimen, with limit lines.
	var tr struct{ Points []struct{ Value float64 } }
	bs.call(t, "GET", "/api/v1/trend?specimen="+specimen+"&figure=HcB", "", "", &tr)
	if len(tr.Points) < 2 {
		t.Fatalf("trend from the API has %d points", len(tr.Points))
	}
	lo, hi := tr.Points[0].Value*0.5, tr.Points[0].Value*1.5
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('[data-view="trend"]').click();
	  document.querySelector('#t-specimen').value = %q; document.querySelector('#t-figure').value = 'HcB';
	  document.querySelector('#t-lo').value = '%g'; document.querySelector('#t-hi').value = '%g';
	  document.querySelector('#trend-draw').click()`, specimen, lo, hi)))
	b.wait("trend points", fmt.Sprintf(`document.querySelectorAll('#trend-plot circle.trend-pt').length === %d && document.querySelectorAll('#trend-plot line.limit').length === 2`, len(tr.Points)), 10*time.Second)
	b.shot("4-trend.png")

	// 5. A live sweep started from the page with the key, watched, then
	//    aborted: refused without the key, accepted with it.
	//    The bench runs in simulated time: the test paces it (at most 5 ms
	//    of bench time per real millisecond) while it watches, and holds it
	//    still while it tries the abort, so the run is mid-sweep whatever
	//    the machine's load.
	stopPace, leave := bs.pace(5*time.Millisecond, time.Millisecond)
	defer leave()
	long := loopRecipe("live-loop", "1 kA/m", "250 A/m/s", 600)
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#key-input').value = %q; document.querySelector('#key-save').click();
	  document.querySelector('[data-view="start"]').click(); document.querySelector('#s-recipe').value = %q; document.querySelector('#s-fixture').value = %q;
	  document.querySelector('#s-confirm').click(); document.querySelector('#start-btn').click()`, browserToken, long, bs.fixture)))
	b.wait("run queued", `document.querySelector('#start-msg').textContent.includes('queued')`, 10*time.Second)
	msg := js[string](b, `document.querySelector('#start-msg').textContent`)
	liveID := strings.Fields(strings.TrimPrefix(msg, "run "))[0]
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('[data-view="live"]').click()`))
	b.wait("live samples", fmt.Sprintf(`document.querySelector('#live-run').textContent === %q && +document.querySelector('#live-count').textContent > 40 && document.querySelectorAll('#live-plot polyline.trace').length > 0`, liveID), 30*time.Second)
	c1 := js[int](b, `+document.querySelector('#live-count').textContent`)
	b.wait("live view updating", fmt.Sprintf(`+document.querySelector('#live-count').textContent > %d`, c1+40), 20*time.Second)
	b.wait("progress shown", `parseFloat(document.querySelector('#live-progress').style.width) > 0`, 5*time.Second)
	stopPace() // simulated time stands still: the run waits mid-sweep
	b.shot("5-live-sweep.png")

	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#key-input').value = ''; document.querySelector('#key-save').click();
	  { const a = document.querySelector('#live-abort'); a.click(); a.click(); }`))
	b.wait("abort refused", `document.querySelector('#live-abort-msg').textContent.includes('not allowed')`, 10*time.Second)
	if st := bs.waitRun(t, liveID, time.Second, "running"); st != "running" {
		t.Fatalf("run %s is %s after a refused abort", liveID, st)
	}
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#key-input').value = %q; document.querySelector('#key-save').click();
	  { const a = document.querySelector('#live-abort'); a.click(); a.click(); }`, browserToken)))
	b.wait("abort accepted", `document.querySelector('#live-abort-msg').textContent.includes('accepted')`, 10*time.Second)
	leave() // time moves again: the engine ramps the winding down
	bs.waitRun(t, liveID, 30*time.Second, "aborted")
	b.wait("live view shows the end", `document.querySelector('#live-state').textContent.startsWith('aborted')`, 10*time.Second)
	b.shot("6-live-aborted.png")
	// Safe ending: the bench's own truth says no current and output off.
	deadline := time.Now().Add(10 * time.Second)
	for tr := bs.bench.Truth(); math.Abs(float64(tr.I)) > 1e-3 || tr.Output; tr = bs.bench.Truth() {
		if time.Now().After(deadline) {
			t.Fatalf("after the abort the bench has I = %g A, output %v", float64(tr.I), tr.Output)
		}
		time.Sleep(50 * time.Millisecond)
	}

	// 7. The run's head names who started and who aborted it (the single
	//    token acts as the shared-token user) and that it used no
	//    calibration record.
	b.wait("aborted run listed", fmt.Sprintf(`!!document.querySelector('#runs-list li[data-run-id=%q][data-state="aborted"]')`, liveID), 10*time.Second)
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#runs-list li[data-run-id=%q]').click()`, liveID)))
	b.wait("who started and aborted", `document.querySelector('#run-head').textContent.includes('started by shared-token') && document.querySelector('#run-head').textContent.includes('aborted by shared-token') && document.querySelector('#run-calibrations').textContent.includes('no calibration record used')`, 15*time.Second)
}

func TestBrowserMagnetQuadrant(t *testing.T) {
	// The page's own (BH)max on a straight-line magnet against the closed
	// form of REFERENCE.md §10 check 12 (textbook): Br = 1.30 T, μrec = 1.05
	// → (BH)max = Br²/(4·μ0·μrec) = 320.2 kJ/m³ at B = 0.65 T; in CGS
	// 320.2 kJ/m³ / 7957.747 J/m³ per MGOe = 40.2 MGOe (§10 check 2).
	if testing.Short() {
		t.Skip("browser test: skipped with -short")
	}
	chromium := findChromium(t)
	rd := memstore.New(nil)
	mag := api.StraightLineMagnet("MAG-1", 4000, 1.30, 1.05)
	mag.Figures = append(mag.Figures, record.Figure{Name: "Hk", Value: 931117.5, U: 2834, Unit: "A/m"},
		record.Figure{Name: "HcB", Value: 985245.31, U: 99.6, Unit: "A/m"})
	api.Put(t, rd, record.Run{ID: "MAG-1", Recipe: "magnet-demag-curve", Fixture: "yoke-demo", Specimen: "M-3",
		Material: "sintered magnet (invented grade)", State: record.Finished, Started: time.Date(2026, 11, 30, 9, 0, 0, 0, time.UTC)},
		mag)
	h, err := api.New(api.Options{Reader: rd})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	t.Cleanup(srv.Close) // after the browser's cleanup, which ends its event stream
	b := newBrowser(t, chromium)
	b.do(chromedp.Navigate(srv.URL + "/"))
	b.wait("run listed", `!!document.querySelector('#runs-list li[data-run-id="MAG-1"]')`, 20*time.Second)
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#runs-list li[data-run-id="MAG-1"]').click()`))
	b.wait("loop plot", `document.body.dataset.loop === "MAG-1#1"`, 10*time.Second)
	// Every figure as value ± U rounded by the page's rule, which must be
	// the Go one (calib/units.Rounded, GUM 7.2.6), in SI and in CGS.
	for _, f := range mag.Figures {
		vs, us := units.Rounded(f.Value, f.U)
		want := strings.ReplaceAll(vs+" ± "+us+" "+f.Unit, "-", "−")
		if us == "—" {
			want = vs + " (U not evaluated) " + f.Unit
		}
		got := js[string](b, fmt.Sprintf(`document.querySelector('#figures tr[data-figure=%q] td.vu').textContent`, f.Name))
		if got != want {
			t.Errorf("figure %s shown as %q, want %q", f.Name, got, want)
		}
	}
	if got := js[string](b, `document.querySelector('#figures tr[data-figure="HcB"] td.cgs-col').textContent`); got != "12381.0 ± 1.3 Oe" {
		// 985 245.31 A/m ± 99.6 A/m = 12 380.96 Oe ± 1.2516 Oe (1 Oe =
		// 79.577 4715 A/m, NBS SP 696): U to 1.3, the value to 0.1.
		t.Errorf("HcB in CGS shown as %q, want 12381.0 ± 1.3 Oe", got)
	}
	cases := [][2]float64{{100.02147, 0.00079}, {1234.5, 9.96}, {48213.7, 99.6}, {-50.0116, 0.0198}, {-0.00004, 0.0123},
		{12345.678, 0}, {320204.6, 2834}, {0.5, 0.0996}, {1.807441, 0.007455}}
	arg, _ := json.Marshal(cases)
	got := js[[][2]string](b, fmt.Sprintf(`%s.map(c => roundU(c[0], c[1]))`, arg))
	for i, c := range cases {
		vs, us := units.Rounded(c[0], c[1])
		if want := [2]string{strings.ReplaceAll(vs, "-", "−"), us}; got[i] != want {
			t.Errorf("page roundU(%g, %g) = %q, Go's units.Rounded %q", c[0], c[1], got[i], want)
		}
	}
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#q2-toggle').click()`))
	b.wait("marker", `!!document.querySelector('#loop-plot circle.bhmax')`, 5*time.Second)
	label := js[string](b, `document.querySelector('#loop-plot .marker-label').textContent`)
	if !strings.Contains(label, "(BH)max 320 kJ/m³") || !strings.Contains(label, "B 0.65 T") {
		t.Errorf("marker label %q, want (BH)max 320 kJ/m³ at B 0.65 T", label)
	}
	b.shot("7-magnet-quadrant.png")
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#loop-toolbar [data-name="units"] [data-v="cgs"]').click()`))
	b.wait("CGS marker", `document.querySelector('#loop-plot .marker-label').textContent.includes('MGOe')`, 5*time.Second)
	if label := js[string](b, `document.querySelector('#loop-plot .marker-label').textContent`); !strings.Contains(label, "(BH)max 40.2 MGOe") {
		t.Errorf("CGS marker label %q, want (BH)max 40.2 MGOe", label)
	}
	// The marker's position read back through the CGS axis: H = −HcB/2 =
	// −492.6 kA/m = −6.190 kOe (1 Oe = 79.577 4715 A/m, NBS SP 696), B =
	// 0.65 T = 6.5 kG.
	type pos struct {
		CX, CY                   float64
		Area, Xlo, Xhi, Ylo, Yhi string
		Xlabel, Ylabel           string
	}
	p := js[pos](b, `(() => { const s = document.querySelector('#loop-plot svg'), c = s.querySelector('circle.bhmax');
	  return {CX: +c.getAttribute('cx'), CY: +c.getAttribute('cy'), Area: s.dataset.area, Xlo: s.dataset.xlo, Xhi: s.dataset.xhi,
	    Ylo: s.dataset.ylo, Yhi: s.dataset.yhi, Xlabel: s.querySelector('.xlabel').textContent, Ylabel: s.querySelector('.ylabel').textContent}; })()`)
	f := func(s string) float64 { v, _ := strconv.ParseFloat(s, 64); return v }
	area := strings.Split(p.Area, ",")
	hk := f(p.Xlo) + (p.CX-f(area[0]))/(f(area[1])-f(area[0]))*(f(p.Xhi)-f(p.Xlo))
	bk := f(p.Ylo) + (f(area[3])-p.CY)/(f(area[3])-f(area[2]))*(f(p.Yhi)-f(p.Ylo))
	if p.Xlabel != "H (kOe)" || !strings.Contains(p.Ylabel, "(kG)") || math.Abs(hk+6.190) > 0.005 || math.Abs(bk-6.5) > 0.005 {
		t.Errorf("CGS marker at %.4f (%s), %.4f (%s); want −6.190 kOe, 6.5 kG", hk, p.Xlabel, bk, p.Ylabel)
	}
}

func TestBrowserProtectedReads(t *testing.T) {
	// A daemon that protects reads: the page says why it shows nothing,
	// and with the key it lists runs and opens the event stream (sent with
	// the Authorization header, not in the URL).
	if testing.Short() {
		t.Skip("browser test: skipped with -short")
	}
	chromium := findChromium(t)
	rd := memstore.New(nil)
	api.Put(t, rd, record.Run{ID: "RUN-P", Recipe: "r", Fixture: "fx", Specimen: "S-1", Material: "m", State: record.Finished,
		Started: time.Date(2026, 11, 30, 9, 0, 0, 0, time.UTC)})
	h, err := api.New(api.Options{Reader: rd, Token: browserToken, ProtectReads: true, Live: live.NewHub(4)})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	t.Cleanup(srv.Close)
	b := newBrowser(t, chromium)
	b.do(chromedp.Navigate(srv.URL + "/"))
	b.wait("refusal shown", `document.querySelector('#runs-msg').textContent.includes('bearer token')`, 20*time.Second)
	if n := js[int](b, `document.querySelectorAll('#runs-list li').length`); n != 0 {
		t.Errorf("%d runs listed without the key", n)
	}
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#key-input').value = %q; document.querySelector('#key-save').click()`, browserToken)))
	b.wait("runs with the key", `!!document.querySelector('#runs-list li[data-run-id="RUN-P"]')`, 10*time.Second)
	b.wait("event stream with the key", `document.querySelector('#stream-state').textContent === 'stream: live'`, 30*time.Second)
}
