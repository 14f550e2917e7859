package link

import (
	"context"
	"os"
	"path/filepath"
	"sort"
	"strings"
)

// PortInfo is one serial port as the kernel describes it.
type PortInfo struct {
	Path         string   `json:"path"`             // /dev/ttyUSB0
	ByID         []string `json:"by_id,omitempty"`  // /dev/serial/by-id links pointing at Path
	Driver       string   `json:"driver,omitempty"` // kernel driver, e.g. ftdi_sio, cdc_acm
	USB          bool     `json:"usb"`
	VID          string   `json:"vid,omitempty"` // uppercase hex, USB only
	PID          string   `json:"pid,omitempty"`
	Serial       string   `json:"serial,omitempty"` // USB serial number, may be empty
	Manufacturer string   `json:"manufacturer,omitempty"`
	Product      string   `json:"product,omitempty"`
}

// Matches reports whether the port is the USB adapter u (VID and PID
// case-insensitively, serial number exactly when u gives one).
func (p PortInfo) Matches(u USB) bool {
	if !p.USB || !strings.EqualFold(p.VID, u.VID) || !strings.EqualFold(p.PID, u.PID) {
		return false
	}
	return u.Serial == "" || p.Serial == u.Serial
}

// Roots of the trees ListPorts reads; tests point them at a fake tree.
var (
	sysClassTTY = "/sys/class/tty"
	devRoot     = "/dev"
)

// ListPorts lists the serial ports of this machine with their USB identity,
// sorted by path. It reads sysfs and /dev/serial/by-id only and opens no
// device: probing a port by opening it can change the line settings of a
// port another program (or a running fixture) is using. Legacy on-board
// ports (ttyS*) are listed only when the kernel reports a UART behind them.
// Pseudo-terminals are not listed.
func ListPorts(ctx context.Context) ([]PortInfo, error) {
	entries, err := os.ReadDir(sysClassTTY)
	if err != nil {
		return nil, err
	}
	byID := byIDLinks()
	var out []PortInfo
	for _, e := range entries {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		name := e.Name()
		dev := filepath.Join(sysClassTTY, name, "device")
		real, err := filepath.EvalSymlinks(dev)
		if err != nil {
			continue // virtual terminal, no hardware behind it
		}
		if strings.HasPrefix(name, "ttyS") {
			if t := readAttr(filepath.Join(sysClassTTY, name, "type")); t == "" || t == "0" {
				continue // placeholder without a UART
			}
		}
		info := PortInfo{Path: filepath.Join(devRoot, name)}
		if d, err := filepath.EvalSymlinks(filepath.Join(real, "driver")); err == nil {
			info.Driver = filepath.Base(d)
		}
		sub, _ := filepath.EvalSymlinks(filepath.Join(real, "subsystem"))
		var usbDev string
		switch filepath.Base(sub) {
		case "usb-serial": // ttyUSB*: interface/ttyUSBn/ → device is two up
			usbDev = filepath.Dir(filepath.Dir(real))
		case "usb": // ttyACM*: the interface; the device is one up
			usbDev = filepath.Dir(real)
		}
		if usbDev != "" {
			if vid := readAttr(filepath.Join(usbDev, "idVendor")); vid != "" {
				info.USB = true
				info.VID = strings.ToUpper(vid)
				info.PID = strings.ToUpper(readAttr(filepath.Join(usbDev, "idProduct")))
				info.Serial = readAttr(filepath.Join(usbDev, "serial"))
				info.Manufacturer = readAttr(filepath.Join(usbDev, "manufacturer"))
				info.Product = readAttr(filepath.Join(usbDev, "product"))
			}
		}
		info.ByID = byID[name]
		out = append(out, info)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Path < out[j].Path })
	return out, nil
}

// byIDLinks maps a tty name (ttyUSB0) to the /dev/serial/by-id links to it.
func byIDLinks() map[string][]string {
	dir := filepath.Join(devRoot, "serial", "by-id")
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil
	}
	m := map[string][]string{}
	for _, e := range entries {
		link := filepath.Join(dir, e.Name())
		target, err := os.Readlink(link)
		if err != nil {
			continue
		}
		name := filepath.Base(target)
		m[name] = append(m[name], link)
	}
	return m
}

func readAttr(path string) string {
	b, err := os.ReadFile(path)
	if err != nil {
		return ""
	}
	return strings.TrimSpace(string(b))
}
