package link

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"hystd/drivers/link/linktest"
)

// usbTree is a minimal sysfs + /dev tree with one USB-serial adapter (VID
// 1a2b, PID 00c3, serial BAY2-SUP) whose tty is named name and whose device
// node is a symlink to a pty.
type usbTree struct {
	t    *testing.T
	sys  string
	dev  string
	name string
}

func newUSBTree(t *testing.T) *usbTree {
	root := t.TempDir()
	u := &usbTree{t: t, sys: filepath.Join(root, "sys"), dev: filepath.Join(root, "dev")}
	for _, d := range []string{filepath.Join(u.sys, "class", "tty"), filepath.Join(u.sys, "bus", "usb-serial"), u.dev} {
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
	}
	oldSys, oldDev := sysClassTTY, devRoot
	sysClassTTY, devRoot = filepath.Join(u.sys, "class", "tty"), u.dev
	t.Cleanup(func() { sysClassTTY, devRoot = oldSys, oldDev })
	return u
}

// plug (re)enumerates the adapter as tty name, backed by the pty at target.
func (u *usbTree) plug(name, target string) {
	t := u.t
	if u.name != "" { // unplug the old one
		os.RemoveAll(filepath.Join(sysClassTTY, u.name))
		os.Remove(filepath.Join(u.dev, u.name))
	}
	u.name = name
	usb := filepath.Join(u.sys, "devices", "usb1", "1-1")
	tty := filepath.Join(usb, "1-1:1.0", name)
	must := func(err error) {
		if err != nil {
			t.Fatal(err)
		}
	}
	must(os.MkdirAll(tty, 0o755))
	must(os.WriteFile(filepath.Join(usb, "idVendor"), []byte("1a2b\n"), 0o644))
	must(os.WriteFile(filepath.Join(usb, "idProduct"), []byte("00c3\n"), 0o644))
	must(os.WriteFile(filepath.Join(usb, "serial"), []byte("BAY2-SUP\n"), 0o644))
	os.Remove(filepath.Join(tty, "subsystem"))
	must(os.Symlink(filepath.Join(u.sys, "bus", "usb-serial"), filepath.Join(tty, "subsystem")))
	cls := filepath.Join(sysClassTTY, name)
	must(os.MkdirAll(cls, 0o755))
	must(os.Symlink(tty, filepath.Join(cls, "device")))
	must(os.Symlink(target, filepath.Join(u.dev, name)))
}

// TestReconnectFindsReenumeratedAdapter: the adapter, opened by USB
// identity as ttyUSB0, hangs up and comes back as ttyUSB1; Reconnect
// resolves the identity again and opens the new name.
func TestReconnectFindsReenumeratedAdapter(t *testing.T) {
	u := newUSBTree(t)
	p1 := openPTY(t)
	u.plug("ttyUSB0", p1.Path)
	c, err := Open(context.Background(), Address{USB: &USB{VID: "1A2B", PID: "00C3", Serial: "BAY2-SUP"}}, lineSettings, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	if got := c.Path(); got != filepath.Join(u.dev, "ttyUSB0") {
		t.Fatalf("opened %q", got)
	}
	p1.Close()
	if _, err := c.Read(context.Background(), make([]byte, 4)); !errors.Is(err, ErrDisconnected) {
		t.Fatalf("got %v", err)
	}
	p2 := openPTY(t)
	u.plug("ttyUSB1", p2.Path)
	r := linktest.Serve(p2, "\n", "\n", 0, func(cmd string) (string, bool) { return "back", true })
	defer r.Stop()
	if err := c.Reconnect(context.Background()); err != nil {
		t.Fatal(err)
	}
	if got := c.Path(); got != filepath.Join(u.dev, "ttyUSB1") {
		t.Fatalf("reopened %q, want the new name", got)
	}
	c.Write(context.Background(), []byte("HI\n"))
	if got := readLine(t, c); got != "back\n" {
		t.Fatalf("got %q", got)
	}
}
