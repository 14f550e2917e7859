package instr

import "errors"

// Transport-neutral errors of an instrument call. The drivers' own errors
// wrap one of them (drivers/link's timeout wraps ErrTimeout, its hang-up,
// closed port and missing port wrap ErrLost, drivers/scpi's desync wraps
// ErrOutOfStep), so the engine and the sampler decide with errors.Is
// without knowing the transport.
var (
	// ErrTimeout: no reply within the read timeout; the line is still up
	// (a reply was lost or late) and the call may be repeated.
	ErrTimeout = errors.New("no reply in time")
	// ErrLost: the line to the instrument is gone (hung up, unplugged,
	// closed, or never found); its state cannot be trusted.
	ErrLost = errors.New("line to the instrument lost")
	// ErrOutOfStep: a reply that cannot belong to its query; the driver
	// resynchronises the line, and the read may be repeated.
	ErrOutOfStep = errors.New("replies out of step with queries")
)

// kindError is a driver's sentinel error: its own message, and a
// transport-neutral kind that errors.Is also matches.
type kindError struct {
	msg  string
	kind error
}

func (e *kindError) Error() string { return e.msg }
func (e *kindError) Unwrap() error { return e.kind }

// NewError returns a new sentinel error with message msg that matches kind
// (ErrTimeout, ErrLost or ErrOutOfStep) under errors.Is. Drivers declare
// their own sentinels with it.
func NewError(msg string, kind error) error { return &kindError{msg: msg, kind: kind} }
