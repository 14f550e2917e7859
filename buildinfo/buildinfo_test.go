package buildinfo

import (
	"runtime/debug"
	"strings"
	"testing"
	"time"
)

func TestFrom(t *testing.T) {
	stamped := &debug.BuildInfo{
		GoVersion: "go1.26.8",
		Main:      debug.Module{Path: "hystd", Version: "v0.0.0-20261202052600-b5b14be1a2c3+dirty"},
		Settings: []debug.BuildSetting{
			{Key: "vcs", Value: "git"},
			{Key: "vcs.revision", Value: "b5b14be1a2c3d4e5f60718293a4b5c6d7e8f9012"},
			{Key: "vcs.time", Value: "2026-12-02T05:26:00Z"},
			{Key: "vcs.modified", Value: "true"},
		},
	}
	devel := &debug.BuildInfo{GoVersion: "go1.26.8", Main: debug.Module{Path: "hystd", Version: "(devel)"}}
	tests := []struct {
		name                 string
		bi                   *debug.BuildInfo
		ok                   bool
		ver, rev, at, mod    string
		wantVersion, wantRev string
		wantModified         bool
		wantSoftware         string
	}{
		{"stamped by the go command", stamped, true, "", "", "", "",
			"0.0.0-20261202052600-b5b14be1a2c3", "b5b14be1a2c3d4e5f60718293a4b5c6d7e8f9012", true,
			"0.0.0-20261202052600-b5b14be1a2c3 (rev b5b14be1a2c3, modified, go1.26.8)"},
		{"release ldflags win", stamped, true, "v1.2.0", "0123456789abcdef0123", "2026-12-01T00:00:00Z", "false",
			"1.2.0", "0123456789abcdef0123", false, "1.2.0 (rev 0123456789ab, go1.26.8)"},
		{"devel without vcs", devel, true, "", "", "", "",
			DevVersion, "", false, DevVersion + " (rev unknown, go1.26.8)"},
		{"no build info", nil, false, "", "", "", "",
			DevVersion, "", false, ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			in := From(tc.bi, tc.ok, tc.ver, tc.rev, tc.at, tc.mod)
			if in.Version != tc.wantVersion || in.Revision != tc.wantRev || in.Modified != tc.wantModified {
				t.Fatalf("got %+v, want version %q revision %q modified %t", in, tc.wantVersion, tc.wantRev, tc.wantModified)
			}
			if tc.wantSoftware != "" && in.Software() != tc.wantSoftware {
				t.Errorf("Software() = %q, want %q", in.Software(), tc.wantSoftware)
			}
			if in.GoVersion == "" {
				t.Error("no Go version")
			}
			if !strings.Contains(in.String(), "revision: ") {
				t.Errorf("String() lacks the revision line:\n%s", in.String())
			}
		})
	}
	if in := From(stamped, true, "", "", "", ""); !in.Time.Equal(time.Date(2026, 12, 2, 5, 26, 0, 0, time.UTC)) {
		t.Errorf("commit time %v", in.Time)
	}
}
