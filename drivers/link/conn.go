// Package link is the serial transport of hystd and the only importer of
// go.bug.st/serial. It opens a port by device path or by USB identity,
// applies the line settings, turns the library's quiet failure modes into
// distinct errors (a read timeout is ErrTimeout, not (0, nil); a hang-up is
// ErrDisconnected, not the same code as our own Close) and reconnects with
// backoff, resolving a USB identity again so that a re-enumerated adapter is
// found under its new name.
//
// link knows bytes, not instruments: re-identification after a reconnect
// (*IDN?) is done by the layer above (drivers/profile).
package link

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"syscall"
	"time"

	"go.bug.st/serial"
	"golang.org/x/sys/unix"
)

// Settings are the line settings of a port.
type Settings struct {
	Baud     int    // required, e.g. 9600, 115200
	DataBits int    // 5..8; 0 means 8
	Parity   string // none | even | odd | mark | space; "" means none
	StopBits string // "1" | "1.5" | "2"; "" means "1"
	Flow     string // none | rtscts; "" means none
	// DTR and RTS, when not nil, are driven to that level after opening.
	// Leave them nil for ports without modem lines (pseudo-terminals).
	DTR, RTS *bool
	// ReadTimeout bounds how long one Read waits for its first byte;
	// 0 waits until the context is done.
	ReadTimeout time.Duration
}

// Backoff is the reconnect schedule: first wait Initial, doubling up to Max,
// at most Attempts opens (0: until the context is done).
type Backoff struct {
	Initial  time.Duration
	Max      time.Duration
	Attempts int
}

// DefaultBackoff is used when Options.Backoff is zero.
var DefaultBackoff = Backoff{Initial: 50 * time.Millisecond, Max: 2 * time.Second, Attempts: 0}

// Options tune a Conn; the zero value is usable.
type Options struct {
	Backoff Backoff
	// Sleep waits d or until ctx is done; nil uses a timer. Tests inject it.
	Sleep func(ctx context.Context, d time.Duration) error
	Log   *slog.Logger // nil: slog.Default()
	// NoLock skips the advisory port lock (see AcquirePort); only for
	// tools that must look at a port another process holds.
	NoLock bool
	// open replaces serial.Open in tests of this package.
	open func(path string, s Settings) (port, error)
}

// port is what Conn needs of a go.bug.st/serial port.
type port interface {
	Read(p []byte) (int, error)
	Write(p []byte) (int, error)
	SetReadTimeout(d time.Duration) error
	Close() error
}

// pollSlice is the longest a single blocking read lasts, so that a
// cancelled context stops a Read within about this time.
const pollSlice = 20 * time.Millisecond

// Conn is an open serial line. Read and Write must not be called
// concurrently with each other (one goroutine owns a Conn); Close may be
// called from any goroutine at any time and unblocks a pending Read.
// The caller closes the Conn.
type Conn struct {
	addr     Address
	settings Settings
	opts     Options

	mu     sync.Mutex // guards the fields below
	p      port
	path   string
	broken bool // a disconnect was seen; Reconnect is needed
	closed bool // Close was called
	lock   *Lock
}

// Open resolves the address and opens the port with the settings. The
// settings are checked first; bad settings are ErrSettings, a missing device
// ErrNotFound.
func Open(ctx context.Context, a Address, s Settings, o Options) (*Conn, error) {
	if err := s.Check(); err != nil {
		return nil, &Error{Op: "open", Port: a.String(), Kind: ErrSettings, Cause: err}
	}
	if o.Backoff == (Backoff{}) {
		o.Backoff = DefaultBackoff
	}
	if o.Sleep == nil {
		o.Sleep = sleepCtx
	}
	if o.Log == nil {
		o.Log = slog.Default()
	}
	lock := !o.NoLock && o.open == nil // this package's tests fake the device
	if o.open == nil {
		o.open = openSerial
	}
	c := &Conn{addr: a, settings: s, opts: o}
	if err := c.openOnce(ctx, "open"); err != nil {
		return nil, err
	}
	if lock {
		// One process per port: held until Close, across reconnects.
		l, err := AcquirePort(c.Path())
		if err != nil {
			c.p.Close()
			kind := ErrBusy
			if !errors.Is(err, ErrBusy) {
				kind = ErrSettings
			}
			return nil, &Error{Op: "open", Port: c.portName(c.Path()), Kind: kind, Cause: err}
		}
		c.lock = l
	}
	return c, nil
}

// Check reports settings that no port accepts.
func (s Settings) Check() error {
	var errs []error
	if s.Baud <= 0 {
		errs = append(errs, fmt.Errorf("baud %d: must be positive", s.Baud))
	}
	if s.DataBits != 0 && (s.DataBits < 5 || s.DataBits > 8) {
		errs = append(errs, fmt.Errorf("data bits %d: must be 5, 6, 7 or 8", s.DataBits))
	}
	if _, err := parity(s.Parity); err != nil {
		errs = append(errs, err)
	}
	if _, err := stopBits(s.StopBits); err != nil {
		errs = append(errs, err)
	}
	if s.Flow != "" && s.Flow != "none" && s.Flow != "rtscts" {
		errs = append(errs, fmt.Errorf("flow %q: want none or rtscts", s.Flow))
	}
	if s.ReadTimeout < 0 {
		errs = append(errs, fmt.Errorf("read timeout %v: must not be negative", s.ReadTimeout))
	}
	return errors.Join(errs...)
}

func parity(s string) (serial.Parity, error) {
	switch s {
	case "", "none":
		return serial.NoParity, nil
	case "even":
		return serial.EvenParity, nil
	case "odd":
		return serial.OddParity, nil
	case "mark":
		return serial.MarkParity, nil
	case "space":
		return serial.SpaceParity, nil
	}
	return 0, fmt.Errorf("parity %q: want none, even, odd, mark or space", s)
}

func stopBits(s string) (serial.StopBits, error) {
	switch s {
	case "", "1":
		return serial.OneStopBit, nil
	case "1.5":
		return serial.OnePointFiveStopBits, nil
	case "2":
		return serial.TwoStopBits, nil
	}
	return 0, fmt.Errorf("stop bits %q: want \"1\", \"1.5\" or \"2\"", s)
}

// openSerial opens a real port with go.bug.st/serial.
func openSerial(path string, s Settings) (port, error) {
	par, _ := parity(s.Parity)
	sb, _ := stopBits(s.StopBits)
	db := s.DataBits
	if db == 0 {
		db = 8
	}
	// Hardware flow control is not part of serial.Mode (Open clears it), so
	// it is set on the tty through a second descriptor opened first: termios
	// settings belong to the tty, not to one descriptor, and opening before
	// serial.Open takes exclusive access keeps this working for non-root.
	var flowFD = -1
	if s.Flow == "rtscts" {
		fd, err := unix.Open(path, unix.O_RDWR|unix.O_NOCTTY|unix.O_NONBLOCK|unix.O_CLOEXEC, 0)
		if err != nil {
			return nil, err
		}
		flowFD = fd
		defer unix.Close(flowFD)
	}
	p, err := serial.Open(path, &serial.Mode{BaudRate: s.Baud, DataBits: db, Parity: par, StopBits: sb})
	if err != nil {
		return nil, err
	}
	if flowFD >= 0 {
		t, err := unix.IoctlGetTermios(flowFD, unix.TCGETS)
		if err == nil {
			t.Cflag |= unix.CRTSCTS
			err = unix.IoctlSetTermios(flowFD, unix.TCSETS, t)
		}
		if err != nil {
			p.Close()
			return nil, fmt.Errorf("enabling RTS/CTS flow control: %w", err)
		}
	}
	if s.DTR != nil {
		if err := p.SetDTR(*s.DTR); err != nil {
			p.Close()
			return nil, fmt.Errorf("setting DTR (does this port have modem lines?): %w", err)
		}
	}
	if s.RTS != nil {
		if err := p.SetRTS(*s.RTS); err != nil {
			p.Close()
			return nil, fmt.Errorf("setting RTS (does this port have modem lines?): %w", err)
		}
	}
	return p, nil
}

func (c *Conn) openOnce(ctx context.Context, op string) error {
	if err := ctx.Err(); err != nil {
		return &Error{Op: op, Port: c.addr.String(), Kind: ErrNotFound, Cause: err}
	}
	path, err := Resolve(ctx, c.addr)
	if err != nil {
		return err
	}
	p, err := c.opts.open(path, c.settings)
	if err != nil {
		kind := ErrNotFound
		var pe *serial.PortError
		if errors.As(err, &pe) && pe.Code() == serial.InvalidSerialPort {
			kind = ErrSettings
		}
		return &Error{Op: op, Port: c.portName(path), Kind: kind, Cause: err}
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.closed {
		p.Close()
		return &Error{Op: op, Port: c.portName(path), Kind: ErrClosed}
	}
	c.p, c.path, c.broken = p, path, false
	return nil
}

func (c *Conn) portName(path string) string {
	if path == "" || path == c.addr.String() {
		return c.addr.String()
	}
	return c.addr.String() + " (" + path + ")"
}

// Path returns the device path the Conn last opened.
func (c *Conn) Path() string {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.path
}

// Address returns the address the Conn was opened with.
func (c *Conn) Address() Address { return c.addr }

// current returns the open port, or the error a call must return now.
func (c *Conn) current(op string) (port, error) {
	c.mu.Lock()
	defer c.mu.Unlock()
	switch {
	case c.closed:
		return nil, &Error{Op: op, Port: c.portName(c.path), Kind: ErrClosed}
	case c.broken || c.p == nil:
		return nil, &Error{Op: op, Port: c.portName(c.path), Kind: ErrDisconnected, Cause: errors.New("reconnect needed")}
	}
	return c.p, nil
}

// fail classifies an error of the port. Our own Close gives ErrClosed;
// anything else marks the Conn broken (ErrDisconnected) and releases the
// descriptor.
func (c *Conn) fail(op string, p port, err error) error {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.closed {
		return &Error{Op: op, Port: c.portName(c.path), Kind: ErrClosed, Cause: err}
	}
	if c.p == p && !c.broken {
		c.broken = true
		p.Close()
		c.opts.Log.Warn("serial port lost", "port", c.portName(c.path), "op", op, "err", err)
	}
	return &Error{Op: op, Port: c.portName(c.path), Kind: ErrDisconnected, Cause: err}
}

// Read reads at least one byte into p. It returns ErrTimeout when no byte
// arrives within Settings.ReadTimeout or before ctx's deadline (the error
// then also matches context.DeadlineExceeded), the context's error when ctx
// is cancelled, ErrDisconnected when the device went away and ErrClosed
// after Close. A cancelled context stops a pending Read within ~20 ms.
func (c *Conn) Read(ctx context.Context, p []byte) (int, error) {
	if len(p) == 0 {
		return 0, nil
	}
	pt, err := c.current("read")
	if err != nil {
		return 0, err
	}
	var deadline time.Time
	if c.settings.ReadTimeout > 0 {
		deadline = time.Now().Add(c.settings.ReadTimeout)
	}
	for {
		if err := ctx.Err(); err != nil {
			if errors.Is(err, context.DeadlineExceeded) {
				return 0, &Error{Op: "read", Port: c.portName(c.Path()), Kind: ErrTimeout, Cause: err}
			}
			return 0, err
		}
		slice := pollSlice
		if !deadline.IsZero() {
			left := time.Until(deadline)
			if left <= 0 {
				return 0, &Error{Op: "read", Port: c.portName(c.Path()), Kind: ErrTimeout,
					Cause: fmt.Errorf("nothing within %v", c.settings.ReadTimeout)}
			}
			slice = min(slice, left)
		}
		if d, ok := ctx.Deadline(); ok {
			slice = max(min(slice, time.Until(d)), time.Millisecond)
		}
		if err := pt.SetReadTimeout(slice); err != nil {
			return 0, c.fail("read", pt, err)
		}
		n, err := pt.Read(p)
		if err != nil {
			return n, c.fail("read", pt, err)
		}
		if n > 0 {
			return n, nil
		}
	}
}

// ReadWithin reads what has arrived into p, waiting at most wait (capped at
// about 20 ms, so that a cancelled context is seen) for the first byte; wait
// 0 only looks. Unlike Read, silence is not an error here: (0, nil) means
// nothing arrived within wait, and Settings.ReadTimeout does not apply (the
// caller keeps its own deadline). A caller serving several ports from one
// goroutine uses it to look at each in turn without blocking on one of them.
// Errors are Read's.
func (c *Conn) ReadWithin(ctx context.Context, p []byte, wait time.Duration) (int, error) {
	if len(p) == 0 {
		return 0, nil
	}
	if err := ctx.Err(); err != nil {
		if errors.Is(err, context.DeadlineExceeded) {
			return 0, &Error{Op: "read", Port: c.portName(c.Path()), Kind: ErrTimeout, Cause: err}
		}
		return 0, err
	}
	pt, err := c.current("read")
	if err != nil {
		return 0, err
	}
	if err := pt.SetReadTimeout(min(max(wait, 0), pollSlice)); err != nil {
		return 0, c.fail("read", pt, err)
	}
	n, err := pt.Read(p)
	if err != nil {
		return n, c.fail("read", pt, err)
	}
	return n, nil
}

// Write writes all of p. A failed write (EIO after a hang-up, a closed
// port) is ErrDisconnected or ErrClosed. A write normally completes at once
// (the kernel buffers it). Only with RTS/CTS flow control can it be held up
// indefinitely (the instrument off or unplugged at the far end): such a
// write runs in a goroutine of its own and is abandoned when ctx is done:
// the port is then closed and the error matches both ErrDisconnected and
// the context's error, so the next call needs Reconnect. Without flow
// control the UART drains its buffer at the line's rate whatever the far
// end does, so the write is made in the caller's goroutine (a command is
// bounded by its line time).
func (c *Conn) Write(ctx context.Context, p []byte) (int, error) {
	if err := ctx.Err(); err != nil {
		return 0, err
	}
	pt, err := c.current("write")
	if err != nil {
		return 0, err
	}
	if ctx.Done() == nil || c.settings.Flow != "rtscts" {
		return c.writeAll(pt, p)
	}
	type result struct {
		n   int
		err error
	}
	done := make(chan result, 1)
	go func() {
		n, err := c.writeAll(pt, p)
		done <- result{n, err}
	}()
	select {
	case r := <-done:
		return r.n, r.err
	case <-ctx.Done():
		select {
		case r := <-done: // finished anyway
			return r.n, r.err
		default:
		}
		return 0, c.fail("write", pt, fmt.Errorf("write abandoned: %w", ctx.Err()))
	}
}

func (c *Conn) writeAll(pt port, p []byte) (int, error) {
	done := 0
	for done < len(p) {
		n, err := pt.Write(p[done:])
		done += max(n, 0)
		if err != nil {
			if errors.Is(err, syscall.EAGAIN) || errors.Is(err, syscall.EINTR) {
				continue
			}
			return done, c.fail("write", pt, err)
		}
		if n == 0 {
			return done, c.fail("write", pt, errors.New("port accepted no bytes"))
		}
	}
	return done, nil
}

// Reconnect closes the current port (if still open) and opens the address
// again with backoff until it succeeds, the attempts run out or ctx is
// done. A USB identity is resolved anew each attempt. It returns the last
// open error on failure; the Conn stays disconnected then and Reconnect may
// be called again.
func (c *Conn) Reconnect(ctx context.Context) error {
	c.mu.Lock()
	if c.closed {
		c.mu.Unlock()
		return &Error{Op: "reconnect", Port: c.addr.String(), Kind: ErrClosed}
	}
	if c.p != nil && !c.broken {
		c.p.Close()
	}
	c.broken = true
	c.mu.Unlock()

	b := c.opts.Backoff
	wait := b.Initial
	for attempt := 1; ; attempt++ {
		err := c.openOnce(ctx, "reconnect")
		if err == nil {
			c.opts.Log.Info("serial port reconnected", "port", c.portName(c.Path()), "attempt", attempt)
			return nil
		}
		if errors.Is(err, ErrClosed) {
			return err
		}
		if b.Attempts > 0 && attempt >= b.Attempts {
			return err
		}
		if serr := c.opts.Sleep(ctx, wait); serr != nil {
			return &Error{Op: "reconnect", Port: c.addr.String(), Kind: ErrDisconnected, Cause: errors.Join(serr, err)}
		}
		wait = min(wait*2, b.Max)
	}
}

// Close closes the port. It is safe to call more than once and from any
// goroutine; later calls of Read, Write and Reconnect return ErrClosed.
func (c *Conn) Close() error {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.closed {
		return nil
	}
	c.closed = true
	defer c.lock.Unlock()
	if c.p != nil && !c.broken {
		return c.p.Close()
	}
	return nil
}

func sleepCtx(ctx context.Context, d time.Duration) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
