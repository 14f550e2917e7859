package main

import (
	"encoding/json"
	"errors"
	"io"
	"os/exec"
	"slices"
	"strings"
	"testing"
)

// TestNoSidewaysImports: the lower floors do not reach sideways into the
// stores, the database client, the serial line, the simulated bench or the
// daemon, directly or through another package. The dependencies are the go
// command's own (`go list -deps`), test files excluded. A forbidden entry
// ending in "/" forbids every package under it.
func TestNoSidewaysImports(t *testing.T) {
	storesLinesBench := []string{
		"modernc.org/sqlite", "hystd/acq/store", // SQLite
		"github.com/influxdata/", "hystd/acq/influx", // InfluxDB
		"go.bug.st/serial", "hystd/drivers/link", // the serial line
		"hystd/drivers/sim", // the simulated bench
	}
	for _, tc := range []struct {
		pkg    string
		forbid []string
		allow  []string // exceptions to forbid
	}{
		{"hystd/acq/recipe", storesLinesBench, nil},
		// drivers/instr holds only the contracts and the words of the
		// instruments (roles, errors); the next case keeps it so.
		{"hystd/acq/process", []string{"hystd/drivers/"}, []string{"hystd/drivers/instr"}},
		{"hystd/drivers/instr", []string{"hystd/drivers/"}, []string{"hystd/drivers/instr"}},
		{"hystd/acq/engine", []string{"hystd/drivers/link"}, nil},
		{"hystd/acq/sampler", []string{"hystd/drivers/link"}, nil},
		{"hystd/acq/api", []string{"hystd/acq/daemon"}, nil},
	} {
		t.Run(tc.pkg, func(t *testing.T) {
			deps := listDeps(t, tc.pkg)
			for _, f := range tc.forbid {
				for _, d := range deps {
					if slices.Contains(tc.allow, d.ImportPath) {
						continue
					}
					if d.ImportPath == f || strings.HasPrefix(d.ImportPath, strings.TrimSuffix(f, "/")+"/") {
						t.Errorf("%s depends on %s (imported by %s)", tc.pkg, d.ImportPath, importers(deps, d.ImportPath))
					}
				}
			}
		})
	}
}

// TestListDepsSeesSidewaysImports: the check above can fail — the daemon,
// a top floor, does reach the SQLite store and the serial line.
func TestListDepsSeesSidewaysImports(t *testing.T) {
	deps := listDeps(t, "hystd/acq/daemon")
	for _, want := range []string{"hystd/acq/daemon", "modernc.org/sqlite", "hystd/drivers/link"} {
		if !slices.ContainsFunc(deps, func(p listedPackage) bool { return p.ImportPath == want }) {
			t.Errorf("go list -deps hystd/acq/daemon does not list %s", want)
		}
	}
}

type listedPackage struct {
	ImportPath string
	Imports    []string
}

// listDeps returns pkg and every package it depends on, from `go list -deps`.
func listDeps(t *testing.T, pkg string) []listedPackage {
	t.Helper()
	out, err := exec.Command("go", "list", "-deps", "-json=ImportPath,Imports", pkg).Output()
	if err != nil {
		var ee *exec.ExitError
		if errors.As(err, &ee) {
			t.Fatalf("go list -deps %s: %v\n%s", pkg, err, ee.Stderr)
		}
		t.Fatalf("go list -deps %s: %v", pkg, err)
	}
	var deps []listedPackage
	dec := json.NewDecoder(strings.NewReader(string(out)))
	for {
		var p listedPackage
		if err := dec.Decode(&p); errors.Is(err, io.EOF) {
			break
		} else if err != nil {
			t.Fatalf("go list -deps %s: %v", pkg, err)
		}
		deps = append(deps, p)
	}
	if len(deps) == 0 || deps[len(deps)-1].ImportPath != pkg {
		t.Fatalf("go list -deps %s: the package itself is not listed last", pkg)
	}
	return deps
}

// importers names the packages among deps that import path.
func importers(deps []listedPackage, path string) string {
	var who []string
	for _, d := range deps {
		if slices.Contains(d.Imports, path) {
			who = append(who, d.ImportPath)
		}
	}
	return strings.Join(who, ", ")
}
