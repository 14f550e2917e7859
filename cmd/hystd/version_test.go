package main

import (
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestVersionFromVCS: a plain `go build` in a git clone (no -ldflags) names
// the clone's revision through runtime/debug.ReadBuildInfo, which the go
// command stamps (vcs.revision). The clone is of this checkout's HEAD.
func TestVersionFromVCS(t *testing.T) {
	if testing.Short() {
		t.Skip("clones the repository and builds hystd: skipped with -short")
	}
	top, err := exec.Command("git", "rev-parse", "--show-toplevel").Output()
	if err != nil {
		t.Skipf("not in a git checkout: %v", err)
	}
	dir := filepath.Join(t.TempDir(), "clone")
	if out, err := exec.Command("git", "clone", "--quiet", "--no-hardlinks", strings.TrimSpace(string(top)), dir).CombinedOutput(); err != nil {
		t.Fatalf("git clone: %v\n%s", err, out)
	}
	rev, err := exec.Command("git", "-C", dir, "rev-parse", "HEAD").Output()
	if err != nil {
		t.Fatal(err)
	}
	bin := filepath.Join(t.TempDir(), "hystd")
	// -buildvcs=true overrides a GOFLAGS=-buildvcs=false in the environment.
	build := exec.Command("go", "build", "-buildvcs=true", "-o", bin, "./cmd/hystd")
	build.Dir = dir
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("go build in the clone: %v\n%s", err, out)
	}
	out, err := exec.Command(bin, "version").Output()
	if err != nil {
		t.Fatal(err)
	}
	r := strings.TrimSpace(string(rev))
	if !strings.Contains(string(out), "revision: "+r) || !strings.Contains(string(out), "modified: false") {
		t.Errorf("hystd version built in a clone at %s:\n%s", r, out)
	}
	t.Logf("%s", out)
}
