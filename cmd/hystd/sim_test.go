package main

import (
	"bufio"
	"context"
	"encoding/json"
	"io"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"go.bug.st/serial"
)

// TestSimCommand runs `hystd sim`, reads its JSON lines, asks the supply
// port for *IDN? and stops the command by cancelling its context (what
// SIGINT does in main).
func TestSimCommand(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	pr, pw := io.Pipe()
	cmd := newSimCmd()
	cmd.SetOut(pw)
	cmd.SetErr(io.Discard)
	cmd.SetArgs([]string{})
	done := make(chan error, 1)
	go func() { done <- cmd.ExecuteContext(ctx); pw.Close() }()

	ports := map[string]string{}
	sc := bufio.NewScanner(pr)
	for len(ports) < 4 && sc.Scan() {
		var l struct{ Role, Port string }
		if err := json.Unmarshal(sc.Bytes(), &l); err != nil {
			t.Fatalf("line %q: %v", sc.Text(), err)
		}
		ports[l.Role] = l.Port
	}
	for _, r := range []string{"supply", "integrator", "field_meter", "thermometer"} {
		if !strings.HasPrefix(ports[r], "/dev/pts/") {
			t.Fatalf("role %s: port %q", r, ports[r])
		}
	}
	p, err := serial.Open(ports["supply"], &serial.Mode{BaudRate: 115200})
	if err != nil {
		t.Fatal(err)
	}
	p.SetReadTimeout(2 * time.Second)
	p.Write([]byte("*IDN?\n"))
	reply, err := bufio.NewReader(p).ReadString('\n')
	p.Close()
	if err != nil || len(strings.Split(strings.TrimSpace(reply), ",")) != 4 {
		t.Errorf("*IDN? = %q, %v", reply, err)
	}
	cancel()
	go io.Copy(io.Discard, pr)
	if err := <-done; err != nil {
		t.Errorf("sim ended with %v", err)
	}
}

func TestSimCommandBadBench(t *testing.T) {
	cmd := newSimCmd()
	cmd.SetOut(io.Discard)
	cmd.SetErr(io.Discard)
	cmd.SetArgs([]string{"--bench", "../../drivers/sim/testdata/bad/ja-k-zero.yaml"})
	err := cmd.ExecuteContext(context.Background())
	if err == nil || !strings.Contains(err.Error(), "ja-k-zero.yaml:13: specimen.jiles_atherton.k_a_m") {
		t.Errorf("err = %v", err)
	}
}

// TestSimTruthAndLinks: --links makes DIR/<role> links to the ptys and
// --truth serves the bench's ground truth, which follows what is commanded
// through the supply's link.
func TestSimTruthAndLinks(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	dir := t.TempDir()
	pe, pwe := io.Pipe()
	cmd := newSimCmd()
	cmd.SetOut(io.Discard)
	cmd.SetErr(pwe)
	cmd.SetArgs([]string{"--truth", "127.0.0.1:0", "--links", dir})
	done := make(chan error, 1)
	go func() { done <- cmd.ExecuteContext(ctx); pwe.Close() }()
	sc := bufio.NewScanner(pe)
	addr := ""
	for addr == "" && sc.Scan() {
		if _, a, ok := strings.Cut(sc.Text(), "truth at http://"); ok {
			addr = strings.TrimSuffix(a, "/truth")
		}
	}
	go io.Copy(io.Discard, pe)
	if addr == "" {
		t.Fatal("no truth address printed")
	}
	get := func() (tr struct {
		Supply struct {
			CurrentA float64 `json:"current_a"`
			OutputOn bool    `json:"output_on"`
		} `json:"supply"`
		Faults map[string]int `json:"faults"`
	}) {
		t.Helper()
		resp, err := http.Get("http://" + addr + "/truth")
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		if err := json.NewDecoder(resp.Body).Decode(&tr); err != nil {
			t.Fatal(err)
		}
		return tr
	}
	if tr := get(); tr.Supply.OutputOn || tr.Supply.CurrentA != 0 || len(tr.Faults) != 6 {
		t.Fatalf("truth at start: %+v", tr)
	}
	for _, r := range []string{"supply", "integrator", "field_meter", "thermometer"} {
		if target, err := os.Readlink(filepath.Join(dir, r)); err != nil || !strings.HasPrefix(target, "/dev/pts/") {
			t.Fatalf("link %s: %q %v", r, target, err)
		}
	}
	p, err := serial.Open(filepath.Join(dir, "supply"), &serial.Mode{BaudRate: 115200})
	if err != nil {
		t.Fatal(err)
	}
	p.Write([]byte("OUTP ON\nSOUR:CURR 0.5\n"))
	p.Close()
	deadline := time.Now().Add(5 * time.Second)
	for tr := get(); !(tr.Supply.OutputOn && math.Abs(tr.Supply.CurrentA-0.5) < 1e-3); tr = get() {
		if time.Now().After(deadline) {
			t.Fatalf("truth never showed 0.5 A, output on: %+v", tr)
		}
		time.Sleep(20 * time.Millisecond)
	}
	resp, err := http.Post("http://"+addr+"/faults", "application/json", strings.NewReader(`[{"role":"supply","kind":"trip"}]`))
	if err != nil || resp.StatusCode != http.StatusNoContent {
		t.Fatalf("POST /faults: %v %v", resp, err)
	}
	if tr := get(); tr.Faults["trip"] != 1 || tr.Supply.OutputOn {
		t.Fatalf("after an injected trip: %+v", tr)
	}
	cancel()
	if err := <-done; err != nil {
		t.Errorf("sim ended with %v", err)
	}
	if _, err := os.Lstat(filepath.Join(dir, "supply")); !os.IsNotExist(err) {
		t.Errorf("link left behind after exit: %v", err)
	}
}

func TestSimTruthRefusesNonLoopback(t *testing.T) {
	cmd := newSimCmd()
	cmd.SetOut(io.Discard)
	cmd.SetErr(io.Discard)
	cmd.SetArgs([]string{"--truth", "0.0.0.0:0"})
	err := cmd.ExecuteContext(context.Background())
	if err == nil || !strings.Contains(err.Error(), "not a loopback address") {
		t.Errorf("err = %v", err)
	}
}
