// Package buildinfo says which build of hystd is running: its version, the
// VCS revision it was built from, whether the tree had uncommitted changes,
// and the Go toolchain. The values come from runtime/debug.ReadBuildInfo (the
// go command stamps the revision of a build inside a git checkout); a release
// build may set Version, Revision and Time with -ldflags, e.g.
//
//	go build -ldflags "-X hystd/buildinfo.Version=1.2.0 -X hystd/buildinfo.Revision=$(git rev-parse HEAD)" ./cmd/hystd
//
// which take precedence over what the go command stamped.
package buildinfo

import (
	"fmt"
	"runtime"
	"runtime/debug"
	"strings"
	"sync"
	"time"
)

// Set with -ldflags "-X hystd/buildinfo.NAME=VALUE"; empty means "from the
// build information".
var (
	Version  string // release version, e.g. 1.2.0 (a leading v is dropped)
	Revision string // full VCS revision
	Time     string // commit time, RFC 3339
	Modified string // "true" when built from a tree with uncommitted changes
)

// DevVersion is the version of a build that names none (go build of a
// checkout without -ldflags).
const DevVersion = "0.1.0-dev"

// Info describes one build.
type Info struct {
	Version   string    // release or module version; DevVersion when unknown
	Revision  string    // VCS revision (full hash), "" when unknown
	Time      time.Time // commit time, zero when unknown
	Modified  bool      // built from a tree with uncommitted changes
	GoVersion string    // toolchain, e.g. go1.26.8
}

var (
	once sync.Once
	cur  Info
)

// Read returns the running binary's build information (computed once).
func Read() Info {
	once.Do(func() {
		bi, ok := debug.ReadBuildInfo()
		cur = From(bi, ok, Version, Revision, Time, Modified)
	})
	return cur
}

// From combines build information with the ldflags values; it is Read's
// logic, separated for tests.
func From(bi *debug.BuildInfo, ok bool, version, revision, at, modified string) Info {
	in := Info{GoVersion: runtime.Version()}
	if ok && bi != nil {
		if bi.GoVersion != "" {
			in.GoVersion = bi.GoVersion
		}
		if v := bi.Main.Version; v != "" && v != "(devel)" {
			in.Version = strings.TrimPrefix(v, "v")
		}
		for _, s := range bi.Settings {
			switch s.Key {
			case "vcs.revision":
				in.Revision = s.Value
			case "vcs.time":
				in.Time, _ = time.Parse(time.RFC3339, s.Value)
			case "vcs.modified":
				in.Modified = s.Value == "true"
			}
		}
	}
	if version != "" {
		in.Version = strings.TrimPrefix(version, "v")
	}
	if revision != "" {
		in.Revision = revision
	}
	if at != "" {
		if t, err := time.Parse(time.RFC3339, at); err == nil {
			in.Time = t
		}
	}
	if modified != "" {
		in.Modified = modified == "true"
	}
	if in.Version == "" {
		in.Version = DevVersion
	}
	// A pseudo-version stamped by the go command ends in "+dirty" when the
	// tree was modified; the flag says so already.
	in.Version = strings.TrimSuffix(in.Version, "+dirty")
	return in
}

// ShortRevision is the first 12 characters of the revision, or "unknown".
func (in Info) ShortRevision() string {
	switch {
	case in.Revision == "":
		return "unknown"
	case len(in.Revision) > 12:
		return in.Revision[:12]
	}
	return in.Revision
}

// Software is the one-line form stored with every run and sent with every
// figure point: "VERSION (rev REVISION[, modified], GOVERSION)", e.g.
// "1.2.0 (rev 0123456789ab, go1.26.8)". Two builds from different revisions
// or trees never share it, unless neither knows its revision.
func (in Info) Software() string {
	mod := ""
	if in.Modified {
		mod = ", modified"
	}
	return fmt.Sprintf("%s (rev %s%s, %s)", in.Version, in.ShortRevision(), mod, in.GoVersion)
}

// String is the multi-line form `hystd version` prints.
func (in Info) String() string {
	var b strings.Builder
	fmt.Fprintf(&b, "hystd %s\n", in.Version)
	rev := in.Revision
	if rev == "" {
		rev = "unknown (built outside a VCS checkout, or with -buildvcs=false)"
	}
	fmt.Fprintf(&b, "revision: %s\n", rev)
	if !in.Time.IsZero() {
		fmt.Fprintf(&b, "commit time: %s\n", in.Time.UTC().Format(time.RFC3339))
	}
	fmt.Fprintf(&b, "modified: %t\n", in.Modified)
	fmt.Fprintf(&b, "go: %s %s/%s\n", in.GoVersion, runtime.GOOS, runtime.GOARCH)
	return b.String()
}

// Labels are the labels of the hystd_build_info metric.
func (in Info) Labels() map[string]string {
	return map[string]string{
		"version":   in.Version,
		"revision":  in.ShortRevision(),
		"modified":  fmt.Sprint(in.Modified),
		"goversion": in.GoVersion,
	}
}
