package link

import (
	"errors"
	"fmt"

	"hystd/drivers/instr"
)

// Sentinel errors of the link layer. Every error a Conn returns wraps exactly
// one of them, so callers decide with errors.Is:
//
//   - ErrTimeout: no byte arrived within the read timeout (or before the
//     context's deadline); the port is still open and usable.
//   - ErrDisconnected: the device went away (USB unplug, pty hang-up, I/O
//     error). The Conn is unusable until Reconnect succeeds.
//   - ErrClosed: Close was called by this program; distinct from a disconnect.
//   - ErrNotFound: no device matches the address.
//   - ErrSettings: the line settings are invalid or the port refused them.
//
// ErrTimeout also matches instr.ErrTimeout; ErrDisconnected, ErrClosed and
// ErrNotFound match instr.ErrLost.
var (
	ErrTimeout      = instr.NewError("read timeout", instr.ErrTimeout)
	ErrDisconnected = instr.NewError("port disconnected", instr.ErrLost)
	ErrClosed       = instr.NewError("port closed", instr.ErrLost)
	ErrNotFound     = instr.NewError("no such port", instr.ErrLost)
	ErrSettings     = errors.New("bad line settings")
)

// Error is a link failure on one port. Kind is one of the sentinels above;
// Cause, when not nil, is the underlying error (an OS error, a
// go.bug.st/serial PortError, a context error).
type Error struct {
	Op    string // "open", "read", "write", "reconnect", "resolve"
	Port  string // the address as configured, and the device path when known
	Kind  error
	Cause error
}

func (e *Error) Error() string {
	s := fmt.Sprintf("link: %s %s: %v", e.Op, e.Port, e.Kind)
	if e.Cause != nil {
		s += ": " + e.Cause.Error()
	}
	return s
}

// Unwrap returns the kind and the cause, so errors.Is matches either.
func (e *Error) Unwrap() []error {
	if e.Cause == nil {
		return []error{e.Kind}
	}
	return []error{e.Kind, e.Cause}
}
