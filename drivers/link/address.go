package link

import (
	"context"
	"fmt"
	"strings"
)

// USB names a USB serial adapter by its descriptor: vendor and product id
// (hex, compared case-insensitively) and, optionally, its serial number
// (compared exactly; required when several identical adapters are plugged).
type USB struct {
	VID    string
	PID    string
	Serial string
}

func (u USB) String() string {
	s := "usb:" + strings.ToLower(u.VID) + ":" + strings.ToLower(u.PID)
	if u.Serial != "" {
		s += ":" + u.Serial
	}
	return s
}

// Address says where an instrument is: a device path (/dev/ttyUSB0, a
// /dev/serial/by-id/... link, a pty) or a USB identity. Exactly one of the
// two is set. A USB identity is resolved to a path again on every open and
// reconnect, so an adapter that re-enumerates under a new name is found.
type Address struct {
	Path string
	USB  *USB
}

func (a Address) String() string {
	if a.USB != nil {
		return a.USB.String()
	}
	return a.Path
}

// Check reports an address that names nothing or two things.
func (a Address) Check() error {
	switch {
	case a.Path == "" && a.USB == nil:
		return &Error{Op: "resolve", Port: "(none)", Kind: ErrSettings, Cause: fmt.Errorf("give a device path or a USB identity")}
	case a.Path != "" && a.USB != nil:
		return &Error{Op: "resolve", Port: a.Path, Kind: ErrSettings, Cause: fmt.Errorf("give a device path or a USB identity, not both")}
	case a.USB != nil && (a.USB.VID == "" || a.USB.PID == ""):
		return &Error{Op: "resolve", Port: a.String(), Kind: ErrSettings, Cause: fmt.Errorf("a USB identity needs vid and pid")}
	}
	return nil
}

// Resolve returns the device path of the address. A path is returned as
// given; a USB identity is looked up in sysfs (see ListPorts: no device is
// opened). No match is ErrNotFound; several matches are an ErrSettings error
// naming them, since picking one could drive the wrong instrument.
func Resolve(ctx context.Context, a Address) (string, error) {
	if err := a.Check(); err != nil {
		return "", err
	}
	if a.USB == nil {
		return a.Path, nil
	}
	ports, err := ListPorts(ctx)
	if err != nil {
		return "", &Error{Op: "resolve", Port: a.String(), Kind: ErrNotFound, Cause: err}
	}
	var hits []string
	for _, p := range ports {
		if p.Matches(*a.USB) {
			hits = append(hits, p.Path)
		}
	}
	switch len(hits) {
	case 0:
		return "", &Error{Op: "resolve", Port: a.String(), Kind: ErrNotFound}
	case 1:
		return hits[0], nil
	}
	return "", &Error{Op: "resolve", Port: a.String(), Kind: ErrSettings,
		Cause: fmt.Errorf("%d adapters match (%s); add the serial number", len(hits), strings.Join(hits, ", "))}
}
