package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/config/configtest"
	"hystd/drivers/clock"
	"hystd/drivers/sim"
)

// TestServeChildOnSimulatedTime runs `hystd serve --sim-clock URL` as a
// child process against a simulated bench in this process, on this
// process's simulated time (clock.Handler): a submitted loop finishes with
// exactly its planned bench time, and the bench's truth says the winding
// ended at zero with the output off. It builds the binary, so it runs only
// with HYSTD_CHILD_TESTS=1 (the fault campaign's way of running the daemon).
func TestServeChildOnSimulatedTime(t *testing.T) {
	if os.Getenv("HYSTD_CHILD_TESTS") != "1" {
		t.Skip("builds and runs hystd as a child process: set HYSTD_CHILD_TESTS=1")
	}
	bin := filepath.Join(t.TempDir(), "hystd")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	cfg, err := sim.DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewSim(time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC))
	b, err := sim.Start(context.Background(), cfg, sim.WithClock(clk))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	srv := httptest.NewServer(clock.Handler(clk))
	t.Cleanup(srv.Close)

	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := ln.Addr().String()
	ln.Close()
	dir := t.TempDir()
	fx, sp := configtest.RingBytes(t, b.Ports())
	const token = "child-test-token-0123456789abcdef"
	files := map[string]string{
		"fixture.yaml": string(fx), "specimen.yaml": string(sp), "token": token + "\n",
		"daemon.yaml": fmt.Sprintf("kind: daemon\nhttp: {addr: %q, token_file: %s}\nstore: {path: %s}\nfixtures:\n  - {fixture: fixture.yaml, specimen: specimen.yaml}\n",
			addr, filepath.Join(dir, "token"), filepath.Join(dir, "hystd.db")),
	}
	for name, data := range files {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(data), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	var logs bytes.Buffer
	child := exec.Command(bin, "serve", "--config", filepath.Join(dir, "daemon.yaml"), "--sim-clock", srv.URL)
	child.Stdout, child.Stderr = &logs, &logs
	if err := child.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		child.Process.Kill()
		child.Wait()
		if t.Failed() {
			t.Logf("child's log:\n%s", logs.String())
		}
	})
	base := "http://" + addr
	waitFor := func(what string, cond func() bool) {
		t.Helper()
		for deadline := time.Now().Add(60 * time.Second); !cond(); time.Sleep(20 * time.Millisecond) {
			if time.Now().After(deadline) {
				t.Fatalf("timed out waiting for %s", what)
			}
		}
	}
	waitFor("the child's /healthz", func() bool {
		r, err := http.Get(base + "/healthz")
		if err != nil {
			return false
		}
		r.Body.Close()
		return r.StatusCode == http.StatusOK
	})
	recipe := "kind: recipe\nname: child-loop\nsteps:\n  - record_loop: {amplitude: 500 A/m, rate: 1 kA/m/s, points: 200, hold: 500ms}\n"
	req, _ := http.NewRequest(http.MethodPost, base+"/api/v1/runs?fixture=aldermoor-ring-2", strings.NewReader(recipe))
	req.Header.Set("Authorization", "Bearer "+token)
	req.Header.Set("Content-Type", "application/yaml")
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	var sub struct {
		RunID string `json:"run_id"`
	}
	if err := json.Unmarshal(body, &sub); err != nil || resp.StatusCode != http.StatusAccepted {
		t.Fatalf("submit: %d %s", resp.StatusCode, body)
	}
	t0 := clk.Now()
	var run struct {
		Run struct{ State, Reason string } `json:"run"`
	}
	waitFor("the run's ending", func() bool {
		r, err := http.Get(base + "/api/v1/runs/" + sub.RunID)
		if err != nil {
			return false
		}
		defer r.Body.Close()
		return json.NewDecoder(r.Body).Decode(&run) == nil && run.Run.State != "queued" && run.Run.State != "running"
	})
	if run.Run.State != "finished" {
		t.Fatalf("run %s %q", run.Run.State, run.Run.Reason)
	}
	// Planned: 0.5 s hold, 2 s sweep, 0.5 s hold, approach and return.
	if d := clk.Now().Sub(t0); d < 3*time.Second || d > 6*time.Second {
		t.Errorf("the run took %s of simulated time", d)
	}
	if tr := b.Truth(); math.Abs(float64(tr.I)) > 1e-3 || tr.Output {
		t.Errorf("bench truth after the run: I = %g A, output on = %v", float64(tr.I), tr.Output)
	}
}
