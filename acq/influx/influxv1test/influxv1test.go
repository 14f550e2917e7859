// Package influxv1test runs a real InfluxDB 1.x server (influxd, Debian's
// influxdb package) for tests: a private config with its data in a temporary
// directory, HTTP on a free port of 127.0.0.1, authentication on with one
// admin user, and InfluxQL queries through /query.
//
// The test is skipped under -short, and when influxd is not installed unless
// CI=true, where it fails (.ci/run installs the package).
package influxv1test

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// User and Password are the admin the server is set up with.
const (
	User     = "hystd-test"
	Password = "bench-pw-1"
)

// Server is a running influxd.
type Server struct {
	URL  string // http://127.0.0.1:PORT
	cmd  *exec.Cmd
	done chan struct{}
	log  string
}

// Binary finds influxd ($HYSTD_INFLUXD, else on PATH, else /usr/bin/influxd).
func Binary() (string, error) {
	if b := os.Getenv("HYSTD_INFLUXD"); b != "" {
		return b, nil
	}
	if b, err := exec.LookPath("influxd"); err == nil {
		return b, nil
	}
	if _, err := os.Stat("/usr/bin/influxd"); err == nil {
		return "/usr/bin/influxd", nil
	}
	return "", errors.New("influxd not found (Debian: apt-get install influxdb)")
}

func freePort() (int, error) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	defer ln.Close()
	return ln.Addr().(*net.TCPAddr).Port, nil
}

// Start starts influxd for the test, creates the admin user and the given
// databases, and stops the server in t.Cleanup.
func Start(t testing.TB, databases ...string) *Server {
	t.Helper()
	if testing.Short() {
		t.Skip("InfluxDB 1.x server test: skipped with -short")
	}
	bin, err := Binary()
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("InfluxDB 1.x server test: %v", err)
		}
		t.Skipf("InfluxDB 1.x server test skipped (set CI=true to fail instead): %v", err)
	}
	dir := t.TempDir()
	httpPort, err := freePort()
	if err != nil {
		t.Fatal(err)
	}
	rpcPort, err := freePort()
	if err != nil {
		t.Fatal(err)
	}
	conf := fmt.Sprintf(`reporting-disabled = true
bind-address = "127.0.0.1:%d"
[meta]
  dir = %q
[data]
  dir = %q
  wal-dir = %q
  query-log-enabled = false
[http]
  enabled = true
  bind-address = "127.0.0.1:%d"
  auth-enabled = true
  log-enabled = false
[monitor]
  store-enabled = false
[continuous_queries]
  enabled = false
`, rpcPort, filepath.Join(dir, "meta"), filepath.Join(dir, "data"), filepath.Join(dir, "wal"), httpPort)
	cf := filepath.Join(dir, "influxdb.conf")
	if err := os.WriteFile(cf, []byte(conf), 0o600); err != nil {
		t.Fatal(err)
	}
	logf := filepath.Join(dir, "influxd.log")
	lf, err := os.Create(logf)
	if err != nil {
		t.Fatal(err)
	}
	defer lf.Close()
	cmd := exec.Command(bin, "-config", cf)
	cmd.Stdout, cmd.Stderr = lf, lf
	cmd.Env = append(os.Environ(), "INFLUXDB_DATA_QUERY_LOG_ENABLED=false")
	if err := cmd.Start(); err != nil {
		t.Fatalf("start %s: %v", bin, err)
	}
	s := &Server{URL: fmt.Sprintf("http://127.0.0.1:%d", httpPort), cmd: cmd, done: make(chan struct{}), log: logf}
	go func() { cmd.Wait(); close(s.done) }()
	t.Cleanup(s.Stop)
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	for {
		req, _ := http.NewRequestWithContext(ctx, http.MethodGet, s.URL+"/ping", nil)
		resp, err := http.DefaultClient.Do(req)
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusNoContent {
				break
			}
		}
		select {
		case <-s.done:
			b, _ := os.ReadFile(logf)
			t.Fatalf("influxd exited before answering /ping:\n%s", b)
		case <-ctx.Done():
			b, _ := os.ReadFile(logf)
			t.Fatalf("influxd did not answer /ping within 60 s:\n%s", b)
		case <-time.After(100 * time.Millisecond):
		}
	}
	// With authentication on and no user yet, the first statement may create
	// the admin (InfluxDB 1.x authentication documentation).
	if _, err := s.Query(ctx, "", fmt.Sprintf("CREATE USER %q WITH PASSWORD '%s' WITH ALL PRIVILEGES", User, Password)); err != nil {
		t.Fatal(err)
	}
	for _, db := range databases {
		if _, err := s.Query(ctx, "", fmt.Sprintf("CREATE DATABASE %q", db)); err != nil {
			t.Fatal(err)
		}
	}
	return s
}

// Stop stops the server (SIGTERM, SIGKILL after 10 s).
func (s *Server) Stop() {
	if s.cmd == nil || s.cmd.Process == nil {
		return
	}
	s.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-s.done:
	case <-time.After(10 * time.Second):
		s.cmd.Process.Kill()
		<-s.done
	}
}

// Series is one series of a query result.
type Series struct {
	Name    string            `json:"name"`
	Tags    map[string]string `json:"tags"`
	Columns []string          `json:"columns"`
	Values  [][]any           `json:"values"`
}

// Query runs InfluxQL as the admin, with nanosecond epoch times, and returns
// the series of its first statement.
func (s *Server) Query(ctx context.Context, db, q string) ([]Series, error) {
	form := url.Values{"q": {q}, "epoch": {"ns"}}
	if db != "" {
		form.Set("db", db)
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, s.URL+"/query", strings.NewReader(form.Encode()))
	if err != nil {
		return nil, err
	}
	req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	req.SetBasicAuth(User, Password)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		return nil, err
	}
	if resp.StatusCode/100 != 2 {
		return nil, fmt.Errorf("influxv1test: %s: %s: %s", q, resp.Status, body)
	}
	var out struct {
		Results []struct {
			Series []Series `json:"series"`
			Error  string   `json:"error"`
		} `json:"results"`
		Error string `json:"error"`
	}
	dec := json.NewDecoder(strings.NewReader(string(body)))
	dec.UseNumber()
	if err := dec.Decode(&out); err != nil {
		return nil, fmt.Errorf("influxv1test: %s: %w", q, err)
	}
	if out.Error != "" {
		return nil, fmt.Errorf("influxv1test: %s: %s", q, out.Error)
	}
	if len(out.Results) == 0 {
		return nil, nil
	}
	if out.Results[0].Error != "" {
		return nil, fmt.Errorf("influxv1test: %s: %s", q, out.Results[0].Error)
	}
	return out.Results[0].Series, nil
}
