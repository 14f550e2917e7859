package main

import (
	"bytes"
	"compress/gzip"
	"encoding/json"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// needTool skips (or, under CI=true, fails) when a program is missing.
func needTool(t *testing.T, name, pkg string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s not found (Debian package %s)", name, pkg)
		}
		t.Skipf("%s not found (Debian package %s; set CI=true to fail instead)", name, pkg)
	}
	return p
}

// TestPackage builds the Debian package with .ci/package (or takes
// $HYSTD_DEB), lists it with dpkg-deb, unpacks it into a scratch root with
// dpkg -x, runs `hystd version` from there and rates the packaged unit with
// systemd-analyze security (offline). The man pages must name every flag
// `--help` shows.
func TestPackage(t *testing.T) {
	if testing.Short() {
		t.Skip("builds a Debian package: skipped with -short")
	}
	needTool(t, "dpkg-deb", "dpkg")
	deb := os.Getenv("HYSTD_DEB")
	if deb == "" {
		out, err := exec.Command("bash", "../../.ci/package", t.TempDir()).Output()
		if err != nil {
			var stderr []byte
			if ee, ok := err.(*exec.ExitError); ok {
				stderr = ee.Stderr
			}
			t.Fatalf("bash .ci/package: %v\n%s", err, stderr)
		}
		deb = strings.TrimSpace(string(out))
	}
	if !regexp.MustCompile(`/hystd_[0-9][^_/]*_[a-z0-9]+\.deb$`).MatchString(deb) {
		t.Errorf("package file name %s is not hystd_VERSION_ARCH.deb", deb)
	}
	contents, err := exec.Command("dpkg-deb", "--contents", deb).Output()
	if err != nil {
		t.Fatalf("dpkg-deb --contents: %v", err)
	}
	for _, want := range []string{
		"./usr/bin/hystd", "./usr/lib/systemd/system/hystd.service", "./usr/lib/sysusers.d/hystd.conf",
		"./usr/lib/tmpfiles.d/hystd.conf", "./etc/hystd/daemon.yaml", "./usr/share/man/man1/hystd.1.gz",
		"./usr/share/man/man1/hystd-serve.1.gz", "./usr/share/bash-completion/completions/hystd",
		"./usr/share/zsh/vendor-completions/_hystd", "./usr/share/fish/vendor_completions.d/hystd.fish",
		"./usr/share/doc/hystd/copyright",
	} {
		if !bytes.Contains(contents, []byte(" "+want+"\n")) {
			t.Errorf("package lacks %s", want)
		}
	}
	conffiles, err := exec.Command("dpkg-deb", "--info", deb, "conffiles").Output()
	if err != nil || !bytes.Contains(conffiles, []byte("/etc/hystd/daemon.yaml")) {
		t.Errorf("conffiles: %v\n%s", err, conffiles)
	}
	root := t.TempDir()
	if out, err := exec.Command("dpkg", "-x", deb, root).CombinedOutput(); err != nil {
		t.Fatalf("dpkg -x: %v\n%s", err, out)
	}
	bin := filepath.Join(root, "usr/bin/hystd")
	out, err := exec.Command(bin, "version").CombinedOutput()
	if err != nil {
		t.Fatalf("%s version: %v\n%s", bin, err, out)
	}
	t.Logf("installed hystd version:\n%s", out)
	rev, err := exec.Command("git", "rev-parse", "HEAD").Output()
	if err != nil {
		t.Fatalf("git rev-parse HEAD: %v", err)
	}
	r := strings.TrimSpace(string(rev))
	if !strings.Contains(string(out), "revision: "+r) {
		t.Errorf("hystd version does not name the checkout's revision %s:\n%s", r, out)
	}
	// A run recorded by the installed binary stores the same revision as its
	// software (the demo on the simulated bench, ~25 s).
	data := t.TempDir()
	demoOut, err := exec.Command(bin, "demo", "--data", data).Output()
	if err != nil {
		t.Fatalf("installed hystd demo: %v\n%s", err, demoOut)
	}
	m := regexp.MustCompile(`run (\S+) finished; stored in`).FindSubmatch(demoOut)
	if m == nil {
		t.Fatalf("no finished run in the demo's output:\n%s", demoOut)
	}
	js, err := exec.Command(bin, "export", string(m[1]), "--data", data, "--format", "json").Output()
	if err != nil {
		t.Fatalf("installed hystd export: %v", err)
	}
	var exp struct {
		Run struct {
			Software string `json:"software"`
		} `json:"run"`
	}
	if err := json.Unmarshal(js, &exp); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(exp.Run.Software, "rev "+r[:12]) {
		t.Errorf("stored software %q does not name revision %s", exp.Run.Software, r[:12])
	}
	t.Logf("stored run %s: software %q", m[1], exp.Run.Software)
	sysusers, _ := os.ReadFile(filepath.Join(root, "usr/lib/sysusers.d/hystd.conf"))
	if !regexp.MustCompile(`(?m)^u hystd `).Match(sysusers) || !regexp.MustCompile(`(?m)^m hystd dialout$`).Match(sysusers) {
		t.Errorf("sysusers entry does not create hystd in dialout:\n%s", sysusers)
	}
	checkManPages(t, root, bin)

	// What the postinst does, done by systemd's own tools in the scratch
	// root: the user hystd in group dialout, /var/lib/hystd owned by it.
	if sysusersBin, err := exec.LookPath("systemd-sysusers"); err == nil {
		for _, f := range []string{"passwd", "group"} {
			b, err := os.ReadFile("/etc/" + f)
			if err != nil {
				t.Fatal(err)
			}
			os.MkdirAll(filepath.Join(root, "etc"), 0o755)
			if err := os.WriteFile(filepath.Join(root, "etc", f), b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
		if out, err := exec.Command(sysusersBin, "--root="+root, filepath.Join(root, "usr/lib/sysusers.d/hystd.conf")).CombinedOutput(); err != nil {
			t.Fatalf("systemd-sysusers: %v\n%s", err, out)
		}
		group, _ := os.ReadFile(filepath.Join(root, "etc/group"))
		if !regexp.MustCompile(`(?m)^dialout:[^:]*:[0-9]+:(.*,)?hystd(,|$)`).Match(group) {
			t.Errorf("after systemd-sysusers, hystd is not in dialout:\n%s", group)
		}
		if out, err := exec.Command("systemd-tmpfiles", "--root="+root, "--create", filepath.Join(root, "usr/lib/tmpfiles.d/hystd.conf")).CombinedOutput(); err != nil {
			t.Errorf("systemd-tmpfiles: %v\n%s", err, out)
		} else if fi, err := os.Stat(filepath.Join(root, "var/lib/hystd/inbox")); err != nil || !fi.IsDir() {
			t.Errorf("systemd-tmpfiles did not create /var/lib/hystd/inbox: %v", err)
		}
	} else if os.Getenv("CI") == "true" {
		t.Errorf("systemd-sysusers not found (Debian package systemd)")
	}

	sa := needTool(t, "systemd-analyze", "systemd")
	unit := filepath.Join(root, "usr/lib/systemd/system/hystd.service")
	sec, err := exec.Command(sa, "security", "--offline=true", unit).CombinedOutput()
	m = regexp.MustCompile(`Overall exposure level for hystd.service: ([0-9.]+)`).FindSubmatch(sec)
	if m == nil {
		t.Fatalf("systemd-analyze security: %v\n%s", err, sec)
	}
	score, _ := strconv.ParseFloat(string(m[1]), 64)
	t.Logf("systemd-analyze security --offline=true: %.1f", score)
	if score > 3.0 {
		t.Errorf("unit exposure %.1f, want ≤ 3.0:\n%s", score, sec)
	}
}

// checkManPages: every command's man page names each flag its --help lists
// (both come from the same cobra command; this catches a stale page).
func checkManPages(t *testing.T, root, bin string) {
	t.Helper()
	flagRe := regexp.MustCompile(`(?m)^\s+(?:-[a-zA-Z], )?(--[a-z][a-z0-9-]*)`)
	for _, c := range newRoot().Commands() {
		if c.Hidden || c.Name() == "help" || c.Name() == "completion" {
			continue
		}
		help, err := exec.Command(bin, c.Name(), "--help").Output()
		if err != nil {
			t.Errorf("hystd %s --help: %v", c.Name(), err)
			continue
		}
		page := readGz(t, filepath.Join(root, "usr/share/man/man1", "hystd-"+c.Name()+".1.gz"))
		page = strings.ReplaceAll(page, `\-`, "-")
		for _, m := range flagRe.FindAllStringSubmatch(string(help), -1) {
			if !strings.Contains(page, m[1]) {
				t.Errorf("man page of %s lacks %s, which --help lists", c.Name(), m[1])
			}
		}
	}
}

func readGz(t *testing.T, p string) string {
	t.Helper()
	f, err := os.Open(p)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	z, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	b, err := io.ReadAll(z)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}
