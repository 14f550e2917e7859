package link

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// fakeTree builds a sysfs and /dev tree like the Linux kernel's (layout of
// /sys/class/tty as documented in the kernel's sysfs-class-tty ABI and seen
// on common machines; from memory): a USB-serial adapter (ttyUSB0), a CDC-ACM
// device (ttyACM0), a placeholder ttyS1 (type 0), a real ttyS0 (type 4) and a
// virtual console without a device link.
func fakeTree(t *testing.T) {
	t.Helper()
	root := t.TempDir()
	sys := filepath.Join(root, "sys")
	dev := filepath.Join(root, "dev")
	mk := func(p string) string {
		if err := os.MkdirAll(p, 0o755); err != nil {
			t.Fatal(err)
		}
		return p
	}
	write := func(p, s string) {
		if err := os.WriteFile(p, []byte(s+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	link := func(target, name string) {
		if err := os.Symlink(target, name); err != nil {
			t.Fatal(err)
		}
	}
	mk(filepath.Join(sys, "bus", "usb-serial"))
	mk(filepath.Join(sys, "bus", "usb"))
	mk(filepath.Join(sys, "bus", "platform"))
	mk(filepath.Join(sys, "drivers", "ftdi_sio"))
	mk(filepath.Join(sys, "drivers", "cdc_acm"))
	// USB device 1-1 with an FTDI-style interface and a ttyUSB0 child.
	usb1 := mk(filepath.Join(sys, "devices", "usb1", "1-1"))
	write(filepath.Join(usb1, "idVendor"), "1a2b")
	write(filepath.Join(usb1, "idProduct"), "00c3")
	write(filepath.Join(usb1, "serial"), "BAY2-SUP")
	write(filepath.Join(usb1, "manufacturer"), "Aldermoor Lab")
	write(filepath.Join(usb1, "product"), "bench adapter")
	tu := mk(filepath.Join(usb1, "1-1:1.0", "ttyUSB0"))
	link(filepath.Join(sys, "bus", "usb-serial"), filepath.Join(tu, "subsystem"))
	link(filepath.Join(sys, "drivers", "ftdi_sio"), filepath.Join(tu, "driver"))
	// USB device 1-2, CDC-ACM: the tty's device is the interface itself.
	usb2 := mk(filepath.Join(sys, "devices", "usb1", "1-2"))
	write(filepath.Join(usb2, "idVendor"), "1A2B")
	write(filepath.Join(usb2, "idProduct"), "00C4")
	write(filepath.Join(usb2, "serial"), "BAY2-INT")
	ia := mk(filepath.Join(usb2, "1-2:1.0"))
	link(filepath.Join(sys, "bus", "usb"), filepath.Join(ia, "subsystem"))
	link(filepath.Join(sys, "drivers", "cdc_acm"), filepath.Join(ia, "driver"))
	ser := mk(filepath.Join(sys, "devices", "platform", "serial8250"))
	link(filepath.Join(sys, "bus", "platform"), filepath.Join(ser, "subsystem"))

	cls := mk(filepath.Join(sys, "class", "tty"))
	for name, target := range map[string]string{"ttyUSB0": tu, "ttyACM0": ia, "ttyS0": ser, "ttyS1": ser} {
		d := mk(filepath.Join(cls, name))
		link(target, filepath.Join(d, "device"))
	}
	write(filepath.Join(cls, "ttyS0", "type"), "4")
	write(filepath.Join(cls, "ttyS1", "type"), "0")
	mk(filepath.Join(cls, "tty1")) // virtual console, no device link

	byid := mk(filepath.Join(dev, "serial", "by-id"))
	link("../../ttyUSB0", filepath.Join(byid, "usb-Aldermoor_bench_adapter_BAY2-SUP-if00-port0"))

	oldSys, oldDev := sysClassTTY, devRoot
	sysClassTTY, devRoot = cls, dev
	t.Cleanup(func() { sysClassTTY, devRoot = oldSys, oldDev })
}

func TestListPorts(t *testing.T) {
	fakeTree(t)
	got, err := ListPorts(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	dev := devRoot
	want := []PortInfo{
		{Path: dev + "/ttyACM0", Driver: "cdc_acm", USB: true, VID: "1A2B", PID: "00C4", Serial: "BAY2-INT"},
		{Path: dev + "/ttyS0"},
		{Path: dev + "/ttyUSB0", Driver: "ftdi_sio", USB: true, VID: "1A2B", PID: "00C3", Serial: "BAY2-SUP",
			Manufacturer: "Aldermoor Lab", Product: "bench adapter",
			ByID: []string{dev + "/serial/by-id/usb-Aldermoor_bench_adapter_BAY2-SUP-if00-port0"}},
	}
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("got\n%+v\nwant\n%+v", got, want)
	}
}

func TestResolveUSB(t *testing.T) {
	fakeTree(t)
	tests := []struct {
		name string
		usb  USB
		want string
		err  error
	}{
		{"lowercase vid matches uppercase", USB{VID: "1a2b", PID: "00c3"}, devRoot + "/ttyUSB0", nil},
		{"by serial", USB{VID: "1A2B", PID: "00C4", Serial: "BAY2-INT"}, devRoot + "/ttyACM0", nil},
		{"wrong serial", USB{VID: "1A2B", PID: "00C4", Serial: "BAY9"}, "", ErrNotFound},
		{"absent", USB{VID: "ffff", PID: "0001"}, "", ErrNotFound},
		{"no pid", USB{VID: "1a2b"}, "", ErrSettings},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			u := tt.usb
			got, err := Resolve(context.Background(), Address{USB: &u})
			if tt.err != nil {
				if !errors.Is(err, tt.err) {
					t.Fatalf("got %q, %v; want %v", got, err, tt.err)
				}
				return
			}
			if err != nil || got != tt.want {
				t.Fatalf("got %q, %v; want %q", got, err, tt.want)
			}
		})
	}
}

func TestResolveAmbiguous(t *testing.T) {
	fakeTree(t)
	// Give the CDC-ACM device the adapter's PID: two adapters match.
	real, err := filepath.EvalSymlinks(filepath.Join(sysClassTTY, "ttyACM0", "device"))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(filepath.Dir(real), "idProduct"), []byte("00c3\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	u := USB{VID: "1a2b", PID: "00c3"}
	_, err = Resolve(context.Background(), Address{USB: &u})
	if !errors.Is(err, ErrSettings) || !strings.Contains(err.Error(), "2 adapters match") {
		t.Fatalf("got %v, want an ambiguity error", err)
	}
	u.Serial = "BAY2-SUP"
	if got, err := Resolve(context.Background(), Address{USB: &u}); err != nil || got != devRoot+"/ttyUSB0" {
		t.Fatalf("with serial: %q, %v", got, err)
	}
	if err := (Address{Path: "/dev/x", USB: &u}).Check(); !errors.Is(err, ErrSettings) {
		t.Fatalf("path and usb together: %v", err)
	}
}
