package link

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/drivers/link/linktest"
)

func openPTY(t *testing.T) *linktest.PTY {
	t.Helper()
	p, err := linktest.Open()
	if err != nil {
		t.Skipf("no pseudo-terminals here: %v", err)
	}
	t.Cleanup(func() { p.Close() })
	return p
}

var lineSettings = Settings{Baud: 115200, ReadTimeout: 200 * time.Millisecond}

func TestSettingsCheck(t *testing.T) {
	tests := []struct {
		name string
		s    Settings
		want string // substring of the error; "" means valid
	}{
		{"plain", Settings{Baud: 9600}, ""},
		{"full", Settings{Baud: 19200, DataBits: 7, Parity: "even", StopBits: "2", Flow: "rtscts"}, ""},
		{"no baud", Settings{}, "baud 0"},
		{"data bits", Settings{Baud: 9600, DataBits: 9}, "data bits 9"},
		{"parity", Settings{Baud: 9600, Parity: "E"}, `parity "E"`},
		{"stop", Settings{Baud: 9600, StopBits: "3"}, `stop bits "3"`},
		{"flow", Settings{Baud: 9600, Flow: "xon"}, `flow "xon"`},
		{"timeout", Settings{Baud: 9600, ReadTimeout: -1}, "read timeout"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			err := tt.s.Check()
			if tt.want == "" {
				if err != nil {
					t.Fatalf("valid settings rejected: %v", err)
				}
				return
			}
			if err == nil || !strings.Contains(err.Error(), tt.want) {
				t.Fatalf("got %v, want an error containing %q", err, tt.want)
			}
		})
	}
}

func TestOpenBadSettingsIsErrSettings(t *testing.T) {
	_, err := Open(context.Background(), Address{Path: "/dev/null"}, Settings{}, Options{})
	if !errors.Is(err, ErrSettings) {
		t.Fatalf("got %v, want ErrSettings", err)
	}
}

func TestOpenMissingIsErrNotFound(t *testing.T) {
	_, err := Open(context.Background(), Address{Path: filepath.Join(t.TempDir(), "ttyNONE")}, lineSettings, Options{})
	if !errors.Is(err, ErrNotFound) {
		t.Fatalf("got %v, want ErrNotFound", err)
	}
}

// TestPTYRoundTrip writes a command and reads the reply through a real pty.
func TestPTYRoundTrip(t *testing.T) {
	p := openPTY(t)
	r := linktest.Serve(p, "\n", "\n", 0, func(cmd string) (string, bool) { return "got " + cmd, true })
	defer r.Stop()
	c, err := Open(context.Background(), Address{Path: p.Path}, lineSettings, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	ctx := context.Background()
	if _, err := c.Write(ctx, []byte("PING\n")); err != nil {
		t.Fatal(err)
	}
	got := readLine(t, c)
	if got != "got PING\n" {
		t.Fatalf("reply %q", got)
	}
}

func readLine(t *testing.T, c *Conn) string {
	t.Helper()
	var b []byte
	buf := make([]byte, 64)
	for !strings.HasSuffix(string(b), "\n") {
		n, err := c.Read(context.Background(), buf)
		if err != nil {
			t.Fatalf("read after %q: %v", b, err)
		}
		b = append(b, buf[:n]...)
	}
	return string(b)
}

func TestReadTimeoutIsDistinct(t *testing.T) {
	p := openPTY(t)
	c, err := Open(context.Background(), Address{Path: p.Path}, Settings{Baud: 9600, ReadTimeout: 30 * time.Millisecond}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	_, err = c.Read(context.Background(), make([]byte, 8))
	if !errors.Is(err, ErrTimeout) || errors.Is(err, ErrDisconnected) {
		t.Fatalf("got %v, want ErrTimeout only", err)
	}
	// The port stays usable after a timeout.
	p.Master.Write([]byte("x"))
	if n, err := c.Read(context.Background(), make([]byte, 8)); err != nil || n != 1 {
		t.Fatalf("after timeout: n=%d err=%v", n, err)
	}
}

// ReadWithin reports silence as (0, nil), not as a timeout, ignoring the
// port's own ReadTimeout; a byte already there is read at once with wait 0.
func TestReadWithinLooks(t *testing.T) {
	p := openPTY(t)
	c, err := Open(context.Background(), Address{Path: p.Path}, Settings{Baud: 9600, ReadTimeout: time.Nanosecond}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	buf := make([]byte, 8)
	if n, err := c.ReadWithin(context.Background(), buf, 0); n != 0 || err != nil {
		t.Fatalf("silent line: n=%d err=%v, want 0, nil", n, err)
	}
	if n, err := c.ReadWithin(context.Background(), buf, 5*time.Millisecond); n != 0 || err != nil {
		t.Fatalf("silent line, waiting: n=%d err=%v, want 0, nil", n, err)
	}
	p.Master.Write([]byte("x\n"))
	got := ""
	for deadline := time.Now().Add(10 * time.Second); len(got) < 2 && time.Now().Before(deadline); {
		n, err := c.ReadWithin(context.Background(), buf, 20*time.Millisecond)
		if err != nil {
			t.Fatal(err)
		}
		got += string(buf[:n])
	}
	if got != "x\n" {
		t.Fatalf("read %q", got)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := c.ReadWithin(ctx, buf, 0); !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled: %v", err)
	}
}

func TestContextDeadlineIsTimeout(t *testing.T) {
	p := openPTY(t)
	c, err := Open(context.Background(), Address{Path: p.Path}, Settings{Baud: 9600}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Millisecond)
	defer cancel()
	_, err = c.Read(ctx, make([]byte, 8))
	if !errors.Is(err, ErrTimeout) || !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("got %v, want ErrTimeout wrapping DeadlineExceeded", err)
	}
}

func TestCancelStopsRead(t *testing.T) {
	p := openPTY(t)
	c, err := Open(context.Background(), Address{Path: p.Path}, Settings{Baud: 9600}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		_, err := c.Read(ctx, make([]byte, 8))
		done <- err
	}()
	cancel()
	select {
	case err := <-done:
		if !errors.Is(err, context.Canceled) {
			t.Fatalf("got %v, want context.Canceled", err)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("a cancelled Read did not return")
	}
}

func TestCloseIsNotDisconnect(t *testing.T) {
	p := openPTY(t)
	c, err := Open(context.Background(), Address{Path: p.Path}, Settings{Baud: 9600}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() {
		_, err := c.Read(context.Background(), make([]byte, 8))
		done <- err
	}()
	// Whether the Read has blocked yet or not, it must end with ErrClosed.
	c.Close()
	select {
	case err := <-done:
		if !errors.Is(err, ErrClosed) || errors.Is(err, ErrDisconnected) {
			t.Fatalf("got %v, want ErrClosed only", err)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("Close did not unblock Read")
	}
	if _, err := c.Write(context.Background(), []byte("x")); !errors.Is(err, ErrClosed) {
		t.Fatalf("write after close: %v", err)
	}
}

// TestHangupAndReconnect hangs the pty up under a by-id style link, moves
// the link to a new pty (a re-enumerated adapter) and reconnects.
func TestHangupAndReconnect(t *testing.T) {
	p1 := openPTY(t)
	l, err := linktest.NewLink(t.TempDir(), "usb-hystd-bench-if00", p1.Path)
	if err != nil {
		t.Fatal(err)
	}
	c, err := Open(context.Background(), Address{Path: l.Path}, lineSettings, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	p1.Close()
	_, err = c.Read(context.Background(), make([]byte, 8))
	if !errors.Is(err, ErrDisconnected) || errors.Is(err, ErrClosed) {
		t.Fatalf("after hang-up: %v, want ErrDisconnected", err)
	}
	if _, err := c.Write(context.Background(), []byte("x")); !errors.Is(err, ErrDisconnected) {
		t.Fatalf("write after hang-up: %v, want ErrDisconnected", err)
	}
	p2 := openPTY(t)
	if err := l.Point(p2.Path); err != nil {
		t.Fatal(err)
	}
	r := linktest.Serve(p2, "\n", "\n", 0, func(cmd string) (string, bool) { return "again " + cmd, true })
	defer r.Stop()
	if err := c.Reconnect(context.Background()); err != nil {
		t.Fatal(err)
	}
	c.Write(context.Background(), []byte("HELLO\n"))
	if got := readLine(t, c); got != "again HELLO\n" {
		t.Fatalf("after reconnect: %q", got)
	}
}

// fakePort fails every open until ok is true.
type fakePort struct{ closed bool }

func (f *fakePort) Read(p []byte) (int, error)           { return 0, nil }
func (f *fakePort) Write(p []byte) (int, error)          { return len(p), nil }
func (f *fakePort) SetReadTimeout(d time.Duration) error { return nil }
func (f *fakePort) Close() error                         { f.closed = true; return nil }

func TestReconnectBackoff(t *testing.T) {
	opens := 0
	var waits []time.Duration
	o := Options{
		Backoff: Backoff{Initial: 10 * time.Millisecond, Max: 35 * time.Millisecond, Attempts: 5},
		Sleep:   func(ctx context.Context, d time.Duration) error { waits = append(waits, d); return nil },
		open: func(path string, s Settings) (port, error) {
			opens++
			if opens == 1 || opens == 6 {
				return &fakePort{}, nil
			}
			return nil, os.ErrNotExist
		},
	}
	c, err := Open(context.Background(), Address{Path: "/dev/ttyFAKE"}, lineSettings, o)
	if err != nil {
		t.Fatal(err)
	}
	if err := c.Reconnect(context.Background()); err != nil {
		t.Fatalf("reconnect on the 5th attempt failed: %v", err)
	}
	want := []time.Duration{10, 20, 35, 35}
	for i := range want {
		want[i] *= time.Millisecond
	}
	if len(waits) != len(want) {
		t.Fatalf("waits %v, want %v", waits, want)
	}
	for i := range want {
		if waits[i] != want[i] {
			t.Fatalf("waits %v, want %v", waits, want)
		}
	}
	// Attempts run out: the last open error is returned, kind ErrNotFound.
	opens, waits = 100, nil
	err = c.Reconnect(context.Background())
	if !errors.Is(err, ErrNotFound) || len(waits) != 4 {
		t.Fatalf("got %v after %d waits, want ErrNotFound after 4", err, len(waits))
	}
}

// stuckPort blocks every write until released, as a line held by flow control.
type stuckPort struct {
	fakePort
	entered chan struct{}
	release chan struct{}
}

func (s *stuckPort) Write(p []byte) (int, error) {
	s.entered <- struct{}{}
	<-s.release
	return 0, errors.New("closed")
}

func TestCancelStopsStuckWrite(t *testing.T) {
	sp := &stuckPort{entered: make(chan struct{}, 1), release: make(chan struct{})}
	defer close(sp.release)
	flow := lineSettings
	flow.Flow = "rtscts" // only flow control holds a write up (see Write)
	c, err := Open(context.Background(), Address{Path: "/dev/ttyFAKE"}, flow,
		Options{open: func(string, Settings) (port, error) { return sp, nil }})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { _, err := c.Write(ctx, []byte("OUT 1\n")); done <- err }()
	<-sp.entered
	cancel()
	select {
	case err := <-done:
		if !errors.Is(err, context.Canceled) || !errors.Is(err, ErrDisconnected) {
			t.Fatalf("got %v, want ErrDisconnected and context.Canceled", err)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("a cancelled Write did not return")
	}
	// The abandoned write left the port closed: the next call needs Reconnect.
	if _, err := c.Write(context.Background(), []byte("x")); !errors.Is(err, ErrDisconnected) {
		t.Fatalf("after abandoned write: %v", err)
	}
}

// lockHolderEnv makes this test binary, run as a child, hold the port lock
// of the path it names until its stdin closes.
const lockHolderEnv = "HYSTD_TEST_HOLD_PORT_LOCK"

func init() {
	path := os.Getenv(lockHolderEnv)
	if path == "" {
		return
	}
	l, err := AcquirePort(path)
	if err != nil {
		fmt.Println("error:", err)
		os.Exit(1)
	}
	fmt.Println("locked")
	io.Copy(io.Discard, os.Stdin)
	l.Unlock()
	os.Exit(0)
}

// TestSecondProcessRefused: while another process holds a port's lock, an
// open of that port — also by root, whom the serial exclusive mode lets
// through — is refused with the holder's PID; a symbolic link to the port
// is the same port. After the holder ends the port opens.
func TestSecondProcessRefused(t *testing.T) {
	t.Setenv(LockDirEnv, t.TempDir())
	dir := t.TempDir()
	port := filepath.Join(dir, "ttyBENCH0")
	if err := os.WriteFile(port, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	alias := filepath.Join(dir, "supply")
	if err := os.Symlink(port, alias); err != nil {
		t.Fatal(err)
	}
	child := exec.Command(os.Args[0], "-test.run=^$")
	child.Env = append(os.Environ(), lockHolderEnv+"="+alias)
	in, _ := child.StdinPipe()
	out, _ := child.StdoutPipe()
	if err := child.Start(); err != nil {
		t.Fatal(err)
	}
	defer child.Wait()
	line, _ := bufio.NewReader(out).ReadString('\n')
	if strings.TrimSpace(line) != "locked" {
		in.Close()
		t.Fatalf("child: %q", line)
	}
	_, err := AcquirePort(port)
	var be *BusyError
	if !errors.As(err, &be) || !errors.Is(err, ErrBusy) || be.PID != child.Process.Pid || !strings.Contains(err.Error(), fmt.Sprintf("process %d", child.Process.Pid)) {
		t.Fatalf("got %v, want the holder's PID %d", err, child.Process.Pid)
	}
	t.Logf("refused (uid %d): %v", os.Getuid(), err)
	in.Close()
	child.Wait()
	l, err := AcquirePort(port)
	if err != nil {
		t.Fatalf("after the holder ended: %v", err)
	}
	l.Unlock()
}
