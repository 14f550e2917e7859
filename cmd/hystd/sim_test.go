package main

import (
	"bufio"
	"context"
	"encoding/json"
	"io"
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
