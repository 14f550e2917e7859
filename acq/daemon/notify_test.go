package daemon

import (
	"net"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"
)

// TestNotify: the systemd notification protocol (sd_notify(3)): one
// datagram per state on the unix socket named by $NOTIFY_SOCKET; nothing
// outside systemd.
func TestNotify(t *testing.T) {
	t.Setenv("NOTIFY_SOCKET", "")
	if sent, err := Notify("READY=1"); sent || err != nil {
		t.Fatalf("outside systemd: sent %v, err %v", sent, err)
	}
	sock := filepath.Join(t.TempDir(), "notify")
	conn, err := net.ListenUnixgram("unixgram", &net.UnixAddr{Name: sock, Net: "unixgram"})
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	t.Setenv("NOTIFY_SOCKET", sock)
	for _, state := range []string{"READY=1", "WATCHDOG=1", "STOPPING=1"} {
		if sent, err := Notify(state); !sent || err != nil {
			t.Fatalf("%s: sent %v, err %v", state, sent, err)
		}
		buf := make([]byte, 256)
		_ = conn.SetReadDeadline(time.Now().Add(5 * time.Second))
		n, err := conn.Read(buf)
		if err != nil || string(buf[:n]) != state {
			t.Errorf("received %q (%v), want %q", buf[:n], err, state)
		}
	}
}

func TestWatchdogInterval(t *testing.T) {
	tests := []struct {
		usec, pid string
		want      time.Duration
		ok        bool
	}{
		{"", "", 0, false},
		{"30000000", "", 15 * time.Second, true},
		{"30000000", strconv.Itoa(os.Getpid()), 15 * time.Second, true},
		{"30000000", "1", 0, false}, // meant for another process
		{"nonsense", "", 0, false},
	}
	for _, tc := range tests {
		t.Setenv("WATCHDOG_USEC", tc.usec)
		t.Setenv("WATCHDOG_PID", tc.pid)
		if got, ok := WatchdogInterval(); got != tc.want || ok != tc.ok {
			t.Errorf("WATCHDOG_USEC=%q WATCHDOG_PID=%q: %s %v, want %s %v", tc.usec, tc.pid, got, ok, tc.want, tc.ok)
		}
	}
}
