package link

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"golang.org/x/sys/unix"
)

// ErrBusy: another process (or another open in this one) holds the
// advisory lock of the port or fixture; BusyError names it.
var ErrBusy = errors.New("in use")

// BusyError is a lock held by someone else: the lock file and the holder's
// PID (0 when it could not be read).
type BusyError struct {
	What string // "port /dev/pts/3", "fixture aldermoor-ring-2"
	File string
	PID  int
}

func (e *BusyError) Error() string {
	who := "another process"
	if e.PID > 0 {
		who = fmt.Sprintf("process %d", e.PID)
		if e.PID == os.Getpid() {
			who += " (this one: opened twice)"
		}
	}
	return fmt.Sprintf("%s is in use by %s (advisory lock %s); stop that process first — two programs on one fixture interleave their commands", e.What, who, e.File)
}

func (e *BusyError) Unwrap() error { return ErrBusy }

// LockDirEnv names the environment variable that overrides LockDir.
const LockDirEnv = "HYSTD_LOCK_DIR"

// LockDir is where hystd keeps its advisory locks: $HYSTD_LOCK_DIR when
// set, else /run/lock (the system's lock directory, a world-writable tmpfs
// on Debian and most distributions) when it exists, else the temporary
// directory. Every hystd process on a machine must see the same one.
func LockDir() string {
	if d := os.Getenv(LockDirEnv); d != "" {
		return d
	}
	if fi, err := os.Stat("/run/lock"); err == nil && fi.IsDir() && unix.Access("/run/lock", unix.W_OK) == nil {
		return "/run/lock"
	}
	return os.TempDir()
}

// Lock is an advisory lock (flock(2), exclusive) on a lock file, held until
// Unlock or the process's end (also kill -9: the kernel releases it). It
// binds root as much as anyone: unlike the serial port's exclusive mode,
// flock has no privileged bypass.
type Lock struct {
	f    *os.File
	path string
}

// Path returns the lock file.
func (l *Lock) Path() string { return l.path }

// Unlock releases the lock. The file stays (removing it would race with a
// process about to lock it).
func (l *Lock) Unlock() error {
	if l == nil || l.f == nil {
		return nil
	}
	err := l.f.Close()
	l.f = nil
	return err
}

var lockUnsafe = strings.NewReplacer("/", "-", "\\", "-", ":", "-", " ", "_")

// Acquire takes the lock named kind and name (e.g. "port", "/dev/pts/3"),
// file LockDir()/hystd-<kind>-<name>.lock, without waiting: a lock held by
// anyone is a *BusyError naming the holder's PID, which the holder writes
// into the file.
func Acquire(kind, name string) (*Lock, error) {
	base := "hystd-" + kind + "-" + strings.Trim(lockUnsafe.Replace(name), "-") + ".lock"
	path := filepath.Join(LockDir(), base)
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE|unix.O_CLOEXEC, 0o644)
	if err != nil && errors.Is(err, os.ErrPermission) {
		// Created by another user: flock works on a read-only descriptor
		// too (the PID is then not ours to write).
		f, err = os.OpenFile(path, os.O_RDONLY|unix.O_CLOEXEC, 0)
	}
	if err != nil {
		return nil, fmt.Errorf("lock %s %s: %w", kind, name, err)
	}
	if err := unix.Flock(int(f.Fd()), unix.LOCK_EX|unix.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, unix.EWOULDBLOCK) {
			return nil, &BusyError{What: kind + " " + name, File: path, PID: readPID(path)}
		}
		return nil, fmt.Errorf("lock %s %s (%s): %w", kind, name, path, err)
	}
	if err := f.Truncate(0); err == nil {
		_, _ = f.WriteAt([]byte(strconv.Itoa(os.Getpid())+"\n"), 0)
	}
	return &Lock{f: f, path: path}, nil
}

func readPID(path string) int {
	b, err := os.ReadFile(path)
	if err != nil {
		return 0
	}
	pid, _ := strconv.Atoi(strings.TrimSpace(string(b)))
	return pid
}

// AcquirePort takes the lock of a serial device, keyed by its real path
// (symbolic links resolved, so /dev/serial/by-id/… and /dev/ttyUSB0, or a
// bench's link and its pty, are one lock).
func AcquirePort(path string) (*Lock, error) {
	if real, err := filepath.EvalSymlinks(path); err == nil {
		path = real
	}
	return Acquire("port", path)
}
