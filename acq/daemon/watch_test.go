package daemon

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"hystd/acq/engine/enginetest"
)

// TestWatchedFolderTraps: a FIFO, a device, a link to /dev/zero, a link to a
// file outside the folder and a 1 GiB file dropped into the watched folder
// are each moved to failed/ unopened, with a result naming why and none of
// their content; a regular file after them is still handled; and SIGTERM
// ends the daemon at once.
func TestWatchedFolderTraps(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\nhttp: {addr: \"127.0.0.1:0\"}\n"+
		"fixtures:\n  - {fixture: fixture-ring-bench.yaml, specimen: specimen-ring-r17.yaml, watch: inbox, poll: 100ms}\n")
	dir := filepath.Dir(p)
	inbox := filepath.Join(dir, "inbox")
	if err := os.Mkdir(inbox, 0o755); err != nil {
		t.Fatal(err)
	}
	const secret = "OUTSIDE-SECRET-7f3a"
	outside := filepath.Join(dir, "outside.txt")
	if err := os.WriteFile(outside, []byte("kind: "+secret+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	in := func(n string) string { return filepath.Join(inbox, n) }
	if err := syscall.Mkfifo(in("a-fifo.yaml"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink("/dev/zero", in("b-zero.yaml")); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink(outside, in("c-outside.yaml")); err != nil {
		t.Fatal(err)
	}
	f, err := os.Create(in("d-huge.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if err := f.Truncate(1 << 30); err != nil { // sparse: 1 GiB of size, no disk
		t.Fatal(err)
	}
	f.Close()
	want := map[string]string{
		"a-fifo.yaml":    "FIFO",
		"b-zero.yaml":    "symbolic link",
		"c-outside.yaml": "symbolic link",
		"d-huge.yaml":    "1073741824 bytes (1024.0 MiB), larger than the 1 MiB",
		"z-bad.yaml":     "z-bad.yaml:1:", // a regular file after the traps: read and refused as a recipe
	}
	// A device node needs CAP_MKNOD (root); /dev/null's numbers are 1, 3.
	if err := syscall.Mknod(in("e-device.yaml"), syscall.S_IFCHR|0o644, 1<<8|3); err == nil {
		want["e-device.yaml"] = "device"
	} else {
		t.Logf("no device node in the test (mknod: %v); the other traps still run", err)
	}
	if err := os.WriteFile(in("z-bad.yaml"), []byte("kind: [recipe\n"), 0o644); err != nil {
		t.Fatal(err)
	}

	clk := &schedClock{enginetest.NewClock()}
	fb := &fakeBench{clk: clk, sup: enginetest.NewSupply(clk.Clock)}
	sigs := make(chan os.Signal, 1)
	served := make(chan error, 1)
	var log bytes.Buffer
	go func() {
		served <- Serve(t.Context(), p, Wiring{Open: fb.open, Signals: sigs, Stderr: &syncWriter{w: &log}, Software: "test"})
	}()

	failed := filepath.Join(inbox, FailedDir)
	deadline := time.Now().Add(20 * time.Second)
	for name := range want {
		res := filepath.Join(failed, strings.TrimSuffix(name, ".yaml")+".result.yaml")
		for {
			if _, err := os.Stat(res); err == nil {
				break
			}
			if time.Now().After(deadline) {
				t.Fatalf("%s: no result in failed/ after 20 s", name)
			}
			time.Sleep(50 * time.Millisecond)
		}
	}
	for name, reason := range want {
		b, err := os.ReadFile(filepath.Join(failed, strings.TrimSuffix(name, ".yaml")+".result.yaml"))
		if err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(string(b), "state: refused") || !strings.Contains(string(b), reason) {
			t.Errorf("%s: result\n%s\nwant state refused and %q", name, b, reason)
		}
		if strings.Contains(string(b), secret) {
			t.Errorf("%s: result leaks the content of a file outside the folder:\n%s", name, b)
		}
		fi, err := os.Lstat(filepath.Join(failed, name))
		if err != nil {
			t.Errorf("%s not moved to failed/: %v", name, err)
			continue
		}
		if strings.HasPrefix(name, "b-") || strings.HasPrefix(name, "c-") {
			if fi.Mode()&os.ModeSymlink == 0 {
				t.Errorf("%s: failed/ holds a %s, want the link itself", name, fi.Mode())
			}
		}
	}
	if b, err := os.ReadFile(outside); err != nil || !strings.Contains(string(b), secret) {
		t.Errorf("the file outside the folder was touched: %q %v", b, err)
	}

	start := time.Now()
	sigs <- syscall.SIGTERM
	select {
	case err := <-served:
		if err != nil {
			t.Fatalf("Serve: %v", err)
		}
		t.Logf("SIGTERM ended the daemon in %s", time.Since(start).Round(time.Millisecond))
	case <-time.After(10 * time.Second):
		t.Fatal("SIGTERM did not end the daemon within 10 s")
	}
	if i, on := fb.sup.Truth(); i != 0 || on {
		t.Errorf("supply left at %g A, output on %v", i, on)
	}
}

// syncWriter serialises writes to a buffer shared with the test.
type syncWriter struct {
	mu sync.Mutex
	w  *bytes.Buffer
}

func (s *syncWriter) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.w.Write(p)
}

// String returns what was written so far.
func (s *syncWriter) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.w.String()
}
