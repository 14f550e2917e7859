// Package vmtest runs a real VictoriaMetrics single-node server for tests:
// it builds the server with the Go command (once per machine, cached under
// the user cache directory), starts it on 127.0.0.1 with its data in a
// temporary directory, and reads points back through /api/v1/export.
//
// Under `go test -short` the server tests are skipped. When the build fails
// the test is skipped, except under CI=true, where it fails.
package vmtest

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/influxdata/influxdb-client-go/v2/api/write"
)

// Module is the server's Go package and version, built with `go install`.
// v1.150.0 is the newest that builds with Go 1.26.
const Module = "github.com/VictoriaMetrics/VictoriaMetrics/app/victoria-metrics@v1.150.0"

// Dir returns the directory the server binary is cached in:
// $HYSTD_VM_DIR, else <user cache dir>/hystd-vm.
func Dir() (string, error) {
	if d := os.Getenv("HYSTD_VM_DIR"); d != "" {
		return d, nil
	}
	c, err := os.UserCacheDir()
	if err != nil {
		return "", err
	}
	return filepath.Join(c, "hystd-vm"), nil
}

var buildMu sync.Mutex

// Binary returns the path of the server binary, building it first if it is
// not in Dir. Concurrent test processes wait for one build (a lock file).
func Binary(ctx context.Context) (string, error) {
	buildMu.Lock()
	defer buildMu.Unlock()
	dir, err := Dir()
	if err != nil {
		return "", err
	}
	bin := filepath.Join(dir, "victoria-metrics")
	if fi, err := os.Stat(bin); err == nil && fi.Mode().IsRegular() {
		return bin, nil
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", err
	}
	lock, err := os.OpenFile(filepath.Join(dir, ".lock"), os.O_CREATE|os.O_RDWR, 0o644)
	if err != nil {
		return "", err
	}
	defer lock.Close()
	if err := syscall.Flock(int(lock.Fd()), syscall.LOCK_EX); err != nil {
		return "", err
	}
	defer syscall.Flock(int(lock.Fd()), syscall.LOCK_UN)
	if _, err := os.Stat(bin); err == nil { // built by another process meanwhile
		return bin, nil
	}
	goCmd := filepath.Join(runtimeGOROOT(), "bin", "go")
	if _, err := os.Stat(goCmd); err != nil {
		goCmd = "go"
	}
	cmd := exec.CommandContext(ctx, goCmd, "install", Module)
	cmd.Env = append(os.Environ(), "GOBIN="+dir, "CGO_ENABLED=0")
	out, err := cmd.CombinedOutput()
	if err != nil {
		return "", fmt.Errorf("go install %s: %v\n%s", Module, err, out)
	}
	if _, err := os.Stat(bin); err != nil {
		return "", fmt.Errorf("go install %s did not produce %s", Module, bin)
	}
	return bin, nil
}

// runtimeGOROOT is the GOROOT of the go command running the tests.
func runtimeGOROOT() string {
	if r := os.Getenv("GOROOT"); r != "" {
		return r
	}
	out, err := exec.Command("go", "env", "GOROOT").Output()
	if err != nil {
		return ""
	}
	return strings.TrimSpace(string(out))
}

// Server is one running (or stopped) server process with its data directory.
type Server struct {
	// URL is the base URL, e.g. http://127.0.0.1:40329; it stays the same
	// across Stop and Start.
	URL  string
	t    testing.TB
	bin  string
	data string
	addr string // host:port once known
	args []string

	mu   sync.Mutex
	cmd  *exec.Cmd
	done chan struct{}
}

// Start builds (if needed) and starts a server for the test and stops it in
// t.Cleanup. Extra flags are passed to the server. It skips the test under
// -short, or when the build fails and CI is not "true".
func Start(t testing.TB, flags ...string) *Server {
	t.Helper()
	if testing.Short() {
		t.Skip("VictoriaMetrics server test: skipped with -short")
	}
	ctx, cancel := context.WithTimeout(context.Background(), 15*time.Minute)
	defer cancel()
	bin, err := Binary(ctx)
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("building the test server: %v", err)
		}
		t.Skipf("building the test server failed (set CI=true to fail instead): %v", err)
	}
	s := &Server{t: t, bin: bin, data: t.TempDir(), addr: "127.0.0.1:0", args: flags}
	if err := s.start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(s.Stop)
	return s
}

var startedRe = regexp.MustCompile(`started server at http://([0-9.]+:[0-9]+)/`)

func (s *Server) start() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.cmd != nil {
		return errors.New("vmtest: server already running")
	}
	args := append([]string{
		"-storageDataPath=" + s.data,
		"-httpListenAddr=" + s.addr,
		"-retentionPeriod=100y",
		"-loggerLevel=INFO",
	}, s.args...)
	cmd := exec.Command(s.bin, args...)
	stderr, err := cmd.StderrPipe()
	if err != nil {
		return err
	}
	cmd.Stdout = io.Discard
	if err := cmd.Start(); err != nil {
		return fmt.Errorf("vmtest: start %s: %w", s.bin, err)
	}
	addrc := make(chan string, 1)
	var tail []string
	var tailMu sync.Mutex
	go func() {
		sc := bufio.NewScanner(stderr)
		sc.Buffer(make([]byte, 64*1024), 1024*1024)
		sent := false
		for sc.Scan() {
			line := sc.Text()
			tailMu.Lock()
			tail = append(tail, line)
			if len(tail) > 20 {
				tail = tail[1:]
			}
			tailMu.Unlock()
			if m := startedRe.FindStringSubmatch(line); m != nil && !sent {
				addrc <- m[1]
				sent = true
			}
		}
		io.Copy(io.Discard, stderr)
	}()
	done := make(chan struct{})
	go func() { cmd.Wait(); close(done) }()
	select {
	case a := <-addrc:
		s.addr = a
		s.URL = "http://" + a
		// With -http.pathPrefix every request, writes and exports alike,
		// goes under the prefix; URL includes it.
		for _, f := range s.args {
			if p, ok := strings.CutPrefix(f, "-http.pathPrefix="); ok {
				s.URL += strings.TrimSuffix(p, "/")
			}
		}
	case <-done:
		tailMu.Lock()
		defer tailMu.Unlock()
		return fmt.Errorf("vmtest: server exited before listening:\n%s", strings.Join(tail, "\n"))
	case <-time.After(60 * time.Second):
		cmd.Process.Kill()
		<-done
		return errors.New("vmtest: server did not report its address within 60 s")
	}
	s.cmd, s.done = cmd, done
	return nil
}

// Stop stops the server (SIGTERM, then SIGKILL after 10 s) and waits for it.
// Stopping a stopped server does nothing.
func (s *Server) Stop() {
	s.mu.Lock()
	cmd, done := s.cmd, s.done
	s.cmd = nil
	s.mu.Unlock()
	if cmd == nil {
		return
	}
	cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-done:
	case <-time.After(10 * time.Second):
		cmd.Process.Kill()
		<-done
	}
}

// Restart starts a stopped server again on the same address and data.
func (s *Server) Restart() {
	s.t.Helper()
	var err error
	for i := 0; i < 50; i++ { // the port may linger a moment after the stop
		if err = s.start(); err == nil {
			return
		}
		time.Sleep(100 * time.Millisecond)
	}
	s.t.Fatalf("vmtest: restart: %v", err)
}

// Series is one exported time series: its labels and raw samples.
type Series struct {
	Metric     map[string]string `json:"metric"`
	Values     []float64         `json:"values"`
	Timestamps []int64           `json:"timestamps"` // ms
}

// Export flushes the server's buffers and returns the raw samples of the
// series matching the selector (e.g. `{__name__=~"hyst_.*",run="r1"}`).
func (s *Server) Export(ctx context.Context, match string) ([]Series, error) {
	if err := s.get(ctx, "/internal/force_flush", nil); err != nil {
		return nil, err
	}
	var out []Series
	err := s.get(ctx, "/api/v1/export?"+url.Values{"match[]": {match}}.Encode(), func(r io.Reader) error {
		dec := json.NewDecoder(r)
		for {
			var se Series
			if err := dec.Decode(&se); err == io.EOF {
				return nil
			} else if err != nil {
				return err
			}
			out = append(out, se)
		}
	})
	return out, err
}

// Count is the total number of raw samples in series.
func Count(series []Series) int {
	n := 0
	for _, s := range series {
		n += len(s.Values)
	}
	return n
}

// WaitCount polls Export until it holds at least want samples or 10 s
// passed (ingested data becomes searchable after a short delay), and
// returns the last answer.
func (s *Server) WaitCount(ctx context.Context, match string, want int) ([]Series, error) {
	deadline := time.Now().Add(10 * time.Second)
	for {
		se, err := s.Export(ctx, match)
		if err == nil && Count(se) >= want || time.Now().After(deadline) {
			return se, err
		}
		time.Sleep(100 * time.Millisecond)
	}
}

func (s *Server) get(ctx context.Context, path string, read func(io.Reader) error) error {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, s.URL+path, nil)
	if err != nil {
		return err
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if resp.StatusCode/100 != 2 {
		b, _ := io.ReadAll(io.LimitReader(resp.Body, 4096))
		return fmt.Errorf("vmtest: GET %s: %s: %s", path, resp.Status, b)
	}
	if read == nil {
		_, err = io.Copy(io.Discard, resp.Body)
		return err
	}
	return read(resp.Body)
}

// QueryResult is one series of an instant query's answer: a vector element
// (Value) or, for a range selector, a matrix element (Values).
type QueryResult struct {
	Metric map[string]string `json:"metric"`
	Value  []any             `json:"value"`
	Values [][]any           `json:"values"`
}

// Query evaluates a PromQL/MetricsQL expression at time at through
// /api/v1/query (after flushing the server's buffers) and returns the
// result's series.
func (s *Server) Query(ctx context.Context, expr string, at time.Time) ([]QueryResult, error) {
	if err := s.get(ctx, "/internal/force_flush", nil); err != nil {
		return nil, err
	}
	var ans struct {
		Status string `json:"status"`
		Error  string `json:"error"`
		Data   struct {
			Result []QueryResult `json:"result"`
		} `json:"data"`
	}
	q := url.Values{"query": {expr}, "time": {fmt.Sprintf("%.3f", float64(at.UnixMilli())/1e3)}}
	err := s.get(ctx, "/api/v1/query?"+q.Encode(), func(r io.Reader) error { return json.NewDecoder(r).Decode(&ans) })
	if err != nil {
		return nil, err
	}
	if ans.Status != "success" {
		return nil, fmt.Errorf("vmtest: query %s: %s", expr, ans.Error)
	}
	return ans.Data.Result, nil
}

// Key names one sample of one series as the server exports it: metric,
// labels but __name__ (sorted), millisecond timestamp.
func Key(name string, labels map[string]string, ms int64) string {
	var ks []string
	for k, v := range labels {
		if k != "__name__" {
			ks = append(ks, k+"="+v)
		}
	}
	sort.Strings(ks)
	return fmt.Sprintf("%s{%s}@%d", name, strings.Join(ks, ","), ms)
}

// AddPoints adds to want, under Key, every field value of pts as the server
// names it (measurement_field, tags as labels, ms timestamps). Two values
// of one series in one millisecond are an error: they could not be told
// apart when read back.
func AddPoints(want map[string]float64, pts []*write.Point) error {
	for _, p := range pts {
		labels := map[string]string{}
		for _, tg := range p.TagList() {
			labels[tg.Key] = tg.Value
		}
		for _, f := range p.FieldList() {
			k := Key(p.Name()+"_"+f.Key, labels, p.Time().UnixMilli())
			if _, dup := want[k]; dup {
				return fmt.Errorf("two points of the same series share a millisecond: %s", k)
			}
			v, ok := f.Value.(float64)
			if !ok {
				return fmt.Errorf("%s: field value %v is not a float", k, f.Value)
			}
			want[k] = v
		}
	}
	return nil
}
