package daemon

import (
	"net"
	"os"
	"strconv"
	"time"
)

// Notify sends one systemd notification ("READY=1", "WATCHDOG=1",
// "RELOADING=1", "STOPPING=1", "STATUS=…") to $NOTIFY_SOCKET. Outside
// systemd (no socket) it does nothing and returns false, nil.
func Notify(state string) (bool, error) {
	addr := os.Getenv("NOTIFY_SOCKET")
	if addr == "" {
		return false, nil
	}
	if addr[0] == '@' { // abstract namespace
		addr = "\x00" + addr[1:]
	}
	c, err := net.DialUnix("unixgram", nil, &net.UnixAddr{Name: addr, Net: "unixgram"})
	if err != nil {
		return false, err
	}
	defer c.Close()
	if _, err := c.Write([]byte(state)); err != nil {
		return false, err
	}
	return true, nil
}

// WatchdogInterval returns how often systemd expects "WATCHDOG=1": half of
// $WATCHDOG_USEC, when that is set for this process ($WATCHDOG_PID absent or
// ours).
func WatchdogInterval() (time.Duration, bool) {
	us, err := strconv.ParseInt(os.Getenv("WATCHDOG_USEC"), 10, 64)
	if err != nil || us <= 0 {
		return 0, false
	}
	if p := os.Getenv("WATCHDOG_PID"); p != "" && p != strconv.Itoa(os.Getpid()) {
		return 0, false
	}
	return time.Duration(us) * time.Microsecond / 2, true
}
