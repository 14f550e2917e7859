package configs

import (
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// TestReadFileRefusals: what the bounded reader refuses, each without
// blocking (a FIFO with no writer would block a plain open for reading).
func TestReadFileRefusals(t *testing.T) {
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	if err := os.WriteFile(p("ok.yaml"), []byte("kind: recipe\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p("edge.yaml"), make([]byte, MaxFileSize), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p("over.yaml"), make([]byte, MaxFileSize+1), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := syscall.Mkfifo(p("fifo.yaml"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink(p("ok.yaml"), p("link.yaml")); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink("/dev/zero", p("zero.yaml")); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name     string
		path     string
		noFollow bool
		want     string // "" = read
	}{
		{"regular", p("ok.yaml"), true, ""},
		{"exactly 1 MiB", p("edge.yaml"), true, ""},
		{"one byte over", p("over.yaml"), false, "1048577 bytes (1.0 MiB), larger than the 1 MiB"},
		{"fifo", p("fifo.yaml"), false, "FIFO"},
		{"device", "/dev/zero", false, "device"},
		{"link followed where allowed", p("link.yaml"), false, ""},
		{"link refused in a watched folder", p("link.yaml"), true, "symbolic link"},
		{"link to a device, watched folder", p("zero.yaml"), true, "symbolic link"},
		{"link to a device, elsewhere", p("zero.yaml"), false, "device"},
		{"missing", p("nope.yaml"), false, "no such file"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			done := make(chan error, 1)
			go func() {
				var err error
				if tc.noFollow {
					_, err = ReadFileNoFollow(tc.path)
				} else {
					_, err = ReadFile(tc.path)
				}
				done <- err
			}()
			select {
			case err := <-done:
				switch {
				case tc.want == "" && err != nil:
					t.Fatalf("refused: %v", err)
				case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
					t.Fatalf("got %v, want an error containing %q", err, tc.want)
				}
			case <-time.After(5 * time.Second):
				t.Fatal("blocked for 5 s")
			}
		})
	}
}
