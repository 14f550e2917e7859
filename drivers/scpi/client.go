// Package scpi is a SCPI client over a byte stream (drivers/link on a real
// port, scpitest in unit tests): commands and queries with configurable
// terminators, numeric replies in the IEEE 488.2 forms with SCPI's special
// values, arbitrary blocks, the IEEE 488.2 common commands, and the error
// queue drained after every setting and returned as *InstrumentError.
//
// Transport errors pass through wrapped, so errors.Is(err, link.ErrTimeout)
// and errors.Is(err, link.ErrDisconnected) keep working above this layer.
package scpi

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"strings"
	"sync/atomic"
	"time"

	"hystd/drivers/instr"
	"hystd/drivers/link"
)

// Stream is a byte stream with context-aware I/O; *link.Conn is one.
// Read returns at least one byte or an error (a timeout is an error
// matching link.ErrTimeout, never (0, nil)).
type Stream interface {
	Read(ctx context.Context, p []byte) (int, error)
	Write(ctx context.Context, p []byte) (int, error)
}

// Options configure a Client; zero fields take the defaults given.
type Options struct {
	Name       string // used in logs; e.g. the profile name
	WriteTerm  string // appended to each command; default "\n"
	ReadTerm   string // ends each reply; default "\n"
	ErrorQuery string // e.g. "SYST:ERR?"; "" when the instrument has no error queue
	MaxReply   int    // longest reply line in bytes; default 64 KiB
	MaxErrors  int    // most queue entries drained at once; default 32
	// Timeout bounds each reply as a whole, from sending the query to its
	// terminator (0: only the stream's own read timeout applies). Expiry is
	// an error matching link.ErrTimeout.
	Timeout time.Duration
	// Log receives one Debug record per exchange (command, reply, round
	// trip); nil logs nothing.
	Log *slog.Logger
	// Now is the clock used for Reply stamps; nil is time.Now (monotonic).
	Now func() time.Time
	// Quiet is how long the line must stay silent before a resync takes it
	// as drained; default 20 ms.
	Quiet time.Duration
	// SyncQuery is sent after a broken exchange, once the line is quiet,
	// and lines are read (and discarded) until one satisfies SyncReply:
	// an answer no reading can be mistaken for (e.g. "*IDN?" answered with
	// the instrument's identity). "" resyncs by draining alone.
	SyncQuery string
	SyncReply func(line string) bool
	// SyncTimeout bounds a whole resync (drain and sync query); default
	// 2·Timeout, or 1 s without Timeout.
	SyncTimeout time.Duration
	// Queued is how many queries the instrument accepts before its first
	// reply is read, answering them in order (AskBehind); default 1.
	Queued int
}

// ErrDesync is the error of an exchange whose reply cannot belong to the
// query asked (it does not parse as its answer), or of a resync that did
// not find the line's answers again: the line is out of step, and the
// client will resynchronise it before the next exchange. Retry the read;
// never use the reply. It matches instr.ErrOutOfStep.
var ErrDesync = instr.NewError("line out of step with its queries", instr.ErrOutOfStep)

// Client speaks SCPI over one Stream. It is not safe for concurrent use:
// one goroutine owns a Client (and its instrument). The caller owns and
// closes the Stream.
type Client struct {
	s     Stream
	o     Options
	buf   []byte // bytes read beyond the last reply
	stale bool   // an exchange broke off: a late reply may still arrive
	rbuf  []byte
	asked []*asked // queries sent by Ask and AskBehind whose replies QueryTimed has not returned, in order
	// breaks counts the exchanges that broke off (Breaks).
	breaks atomic.Int64
	// salvaged are error-queue entries found among the stale input a
	// resync discarded (a late reply to the error query: the instrument
	// had already removed the entry from its queue), for Salvaged.
	salvaged []QueueEntry
}

// Poller is a Stream that can also look for input without blocking:
// ReadWithin reads what has arrived, waiting at most wait for the first
// byte, and returns (0, nil) when nothing came. *link.Conn is one.
type Poller interface {
	ReadWithin(ctx context.Context, p []byte, wait time.Duration) (int, error)
}

// asked is a query on its way: sent by Ask, its reply collected by Await
// or QueryTimed.
type asked struct {
	cmd      string
	sent     time.Time // Options.Now when the query was sent
	deadline time.Time // the reply is late after this (machine clock); zero: no Timeout
	done     bool      // reply or err is final
	reply    Reply
	err      error
}

// New returns a Client on s.
func New(s Stream, o Options) *Client {
	if o.WriteTerm == "" {
		o.WriteTerm = "\n"
	}
	if o.ReadTerm == "" {
		o.ReadTerm = "\n"
	}
	if o.MaxReply <= 0 {
		o.MaxReply = 64 << 10
	}
	if o.MaxErrors <= 0 {
		o.MaxErrors = 32
	}
	if o.Log == nil {
		o.Log = slog.New(slog.DiscardHandler)
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	if o.Quiet <= 0 {
		o.Quiet = DefaultQuiet
	}
	if o.Queued <= 0 {
		o.Queued = 1
	}
	if o.SyncTimeout <= 0 {
		o.SyncTimeout = time.Second
		if o.Timeout > 0 {
			o.SyncTimeout = 2 * o.Timeout
		}
	}
	return &Client{s: s, o: o, rbuf: make([]byte, 512)}
}

// Options returns the options in effect (defaults filled in).
func (c *Client) Options() Options { return c.o }

// Reply is a reply with the times its request was sent and it was received.
type Reply struct {
	Text     string // terminator removed
	Sent     time.Time
	Received time.Time
}

// Mid returns the midpoint of the exchange, the best estimate of when the
// instrument took the reading, and half the round trip, its uncertainty.
func (r Reply) Mid() (time.Time, time.Duration) {
	half := r.Received.Sub(r.Sent) / 2
	return r.Sent.Add(half), half
}

// Write sends one command (the terminator is appended). It does not read
// the error queue; use Set for settings.
func (c *Client) Write(ctx context.Context, cmd string) error {
	if err := c.resync(ctx); err != nil {
		return err
	}
	if _, err := c.s.Write(ctx, []byte(cmd+c.o.WriteTerm)); err != nil {
		c.broke()
		c.o.Log.Debug("scpi write failed", "instr", c.o.Name, "cmd", cmd, "err", err)
		return fmt.Errorf("scpi %q: %w", cmd, err)
	}
	c.o.Log.Debug("scpi write", "instr", c.o.Name, "cmd", cmd)
	return nil
}

// Set sends a setting and then drains the error queue; a non-empty queue is
// returned as *InstrumentError.
func (c *Client) Set(ctx context.Context, cmd string) error {
	if err := c.Write(ctx, cmd); err != nil {
		return err
	}
	return c.DrainErrors(ctx, cmd)
}

// Query sends a query and returns its reply line.
func (c *Client) Query(ctx context.Context, cmd string) (string, error) {
	r, err := c.QueryTimed(ctx, cmd)
	return r.Text, err
}

// QueryTimed sends a query and returns its reply with the send and
// receive times (monotonic clock). When the first query sent by Ask or
// AskBehind and not yet collected is the same query, its reply is
// collected instead (no second query), stamped from its send. A reply
// that failed (late, lost, cut off) abandons the queries queued behind it:
// the line is resynchronised before the next exchange and none of their
// replies is taken.
func (c *Client) QueryTimed(ctx context.Context, cmd string) (Reply, error) {
	if len(c.asked) == 0 || c.asked[0].cmd != cmd {
		if err := c.Ask(ctx, cmd); err != nil {
			return Reply{}, err
		}
	}
	a := c.asked[0]
	c.asked = c.asked[1:]
	c.collect(ctx, a)
	if a.err != nil {
		c.abandon()
	}
	return a.reply, a.err
}

// collect reads a's reply unless it is settled already.
func (c *Client) collect(ctx context.Context, a *asked) {
	if a.done {
		return
	}
	rctx, cancel := ctx, context.CancelFunc(func() {})
	if !a.deadline.IsZero() {
		rctx, cancel = context.WithDeadline(ctx, a.deadline)
	}
	line, err := c.readLine(rctx)
	cancel()
	c.answered(a, line, c.asTimeout(ctx, err))
}

// Ask sends a query without waiting for its reply, so that one goroutine
// can have queries on several lines at once; Await tells when the reply is
// in and QueryTimed (with the same query) returns it. Its Timeout counts
// from the send. Any other exchange before that, Ask included, abandons
// the query (the line is then resynchronised: its reply may still come).
func (c *Client) Ask(ctx context.Context, cmd string) error {
	if err := c.resync(ctx); err != nil {
		return err
	}
	return c.send(ctx, cmd)
}

// AskBehind is Ask that keeps the queries already asked and not yet
// collected when fewer than Options.Queued are and the line is in step:
// cmd goes out behind them, and QueryTimed collects the replies in the
// order of their queries. Otherwise it is Ask.
func (c *Client) AskBehind(ctx context.Context, cmd string) error {
	if len(c.asked) == 0 || len(c.asked) >= c.o.Queued || c.stale {
		return c.Ask(ctx, cmd)
	}
	return c.send(ctx, cmd)
}

// send writes a query and queues it for its reply.
func (c *Client) send(ctx context.Context, cmd string) error {
	a := &asked{cmd: cmd, sent: c.o.Now()}
	if _, err := c.s.Write(ctx, []byte(cmd+c.o.WriteTerm)); err != nil {
		c.abandon()
		c.broke()
		c.o.Log.Debug("scpi query failed", "instr", c.o.Name, "cmd", cmd, "err", err)
		return fmt.Errorf("scpi %q: %w", cmd, err)
	}
	if c.o.Timeout > 0 {
		a.deadline = time.Now().Add(c.o.Timeout)
	}
	c.asked = append(c.asked, a)
	return nil
}

// abandon drops the queries asked and not collected; one whose reply is
// not in yet leaves the line to be resynchronised (its reply may still
// come).
func (c *Client) abandon() {
	for _, a := range c.asked {
		if !a.done {
			c.broke()
		}
	}
	c.asked = nil
}

// Await reports whether the reply to the first query asked (Ask,
// AskBehind) and not yet collected is in, or its exchange has failed (late past Timeout, the line lost, ctx done), so that
// QueryTimed returns without waiting; it waits at most wait for input
// (0: only looks), and stamps the reply when its terminator arrives. As in
// QueryTimed, nothing is read once the Timeout has passed: a reply not
// read by then is late, even if its bytes wait in the port's buffer (the
// resync discards them). On a Stream that is not a Poller it waits for the
// reply. Without a query asked it returns true.
func (c *Client) Await(ctx context.Context, wait time.Duration) bool {
	if len(c.asked) == 0 || c.asked[0].done {
		return true
	}
	a := c.asked[0]
	p, ok := c.s.(Poller)
	if !ok {
		c.collect(ctx, a) // kept for the caller's QueryTimed
		return true
	}
	end := time.Now().Add(wait)
	for {
		line, ok, err := c.takeLine()
		if ok || err != nil {
			c.answered(a, line, err)
			return true
		}
		if !a.deadline.IsZero() && !time.Now().Before(a.deadline) {
			c.broke()
			c.answered(a, string(c.buf), &link.Error{Op: "read", Port: c.o.Name, Kind: link.ErrTimeout,
				Cause: fmt.Errorf("no complete reply within %v", c.o.Timeout)})
			return true
		}
		left := time.Until(end)
		if !a.deadline.IsZero() {
			left = min(left, time.Until(a.deadline))
		}
		n, err := p.ReadWithin(ctx, c.rbuf, max(left, 0))
		if err = c.took(n, err); err != nil {
			c.answered(a, string(c.buf), c.asTimeout(ctx, err))
			return true
		}
		if n == 0 && !time.Now().Before(end) {
			return false
		}
	}
}

// answered settles an asked query with its reply line or error.
func (c *Client) answered(a *asked, line string, err error) {
	a.done = true
	if err != nil {
		c.o.Log.Debug("scpi query failed", "instr", c.o.Name, "cmd", a.cmd, "partial", line, "err", err)
		a.err = fmt.Errorf("scpi %q: %w", a.cmd, err)
		return
	}
	got := c.o.Now()
	c.o.Log.Debug("scpi query", "instr", c.o.Name, "cmd", a.cmd, "reply", line, "rtt", got.Sub(a.sent))
	a.reply = Reply{Text: line, Sent: a.sent, Received: got}
}

// QueryNumber sends a query and parses the reply with ParseNumber.
func (c *Client) QueryNumber(ctx context.Context, cmd string) (float64, error) {
	s, err := c.Query(ctx, cmd)
	if err != nil {
		return 0, err
	}
	v, err := ParseNumber(s)
	if err != nil {
		return 0, fmt.Errorf("scpi %q: %w", cmd, err)
	}
	return v, nil
}

// QueryBlock sends a query whose reply is an arbitrary block and returns
// the block's data; the read terminator after a definite-length block is
// consumed when present. Options.Timeout bounds the silence before the
// reply and between its chunks, not the whole block: a block of 100 k
// values takes seconds on a serial line (10 bits a byte); ctx bounds it all.
func (c *Client) QueryBlock(ctx context.Context, cmd string) ([]byte, error) {
	if err := c.resync(ctx); err != nil {
		return nil, err
	}
	if _, err := c.s.Write(ctx, []byte(cmd+c.o.WriteTerm)); err != nil {
		c.broke()
		return nil, fmt.Errorf("scpi %q: %w", cmd, err)
	}
	parent := ctx
	ctx, cancel := c.replyCtx(ctx)
	defer func() { cancel() }()
	for {
		data, rest, err := ParseBlock(c.buf, c.o.ReadTerm)
		if err == nil {
			definite := c.buf[1] != '0' // ParseBlock succeeded: the header is there
			out := bytes.Clone(data)
			c.buf = append(c.buf[:0], rest...)
			if definite {
				// The response terminator follows the block; wait for it so
				// that it does not answer the next query. Without one (a
				// timeout), keep the data and discard late bytes next time.
				for len(c.buf) < len(c.o.ReadTerm) && strings.HasPrefix(c.o.ReadTerm, string(c.buf)) {
					if err := c.fill(ctx); err != nil {
						if errors.Is(c.asTimeout(parent, err), link.ErrTimeout) {
							c.broke()
							break
						}
						return nil, fmt.Errorf("scpi %q: %w", cmd, err)
					}
				}
				c.buf = bytes.TrimPrefix(c.buf, []byte(c.o.ReadTerm))
			}
			c.o.Log.Debug("scpi block", "instr", c.o.Name, "cmd", cmd, "bytes", len(out))
			return out, nil
		}
		if !errors.Is(err, ErrShortBlock) {
			c.broke()
			return nil, fmt.Errorf("scpi %q: %w", cmd, err)
		}
		if len(c.buf) > MaxBlock+32 {
			c.broke()
			return nil, fmt.Errorf("scpi %q: block longer than %d bytes", cmd, MaxBlock)
		}
		n := len(c.buf)
		if err := c.fill(ctx); err != nil {
			return nil, fmt.Errorf("scpi %q: %w", cmd, c.asTimeout(parent, err))
		}
		if len(c.buf) > n { // the block is coming: the reply timeout starts again
			cancel()
			ctx, cancel = c.replyCtx(parent)
		}
	}
}

// replyCtx bounds one reply by Options.Timeout.
func (c *Client) replyCtx(ctx context.Context) (context.Context, context.CancelFunc) {
	if c.o.Timeout <= 0 {
		return ctx, func() {}
	}
	return context.WithTimeout(ctx, c.o.Timeout)
}

// asTimeout turns the expiry of the reply timeout into link.ErrTimeout
// whatever the stream reported, keeping the caller's own cancellation as is.
func (c *Client) asTimeout(parent context.Context, err error) error {
	if err == nil || parent.Err() != nil || errors.Is(err, link.ErrTimeout) || !errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	return &link.Error{Op: "read", Port: c.o.Name, Kind: link.ErrTimeout, Cause: fmt.Errorf("no complete reply within %v: %w", c.o.Timeout, err)}
}

// DrainErrors reads the error queue until it reports code 0 and returns
// what it held as *InstrumentError (nil when empty). after names the
// command the errors are attributed to. Without an ErrorQuery it returns nil.
func (c *Client) DrainErrors(ctx context.Context, after string) error {
	if c.o.ErrorQuery == "" {
		return nil
	}
	var got []QueueEntry
	for range c.o.MaxErrors {
		s, err := c.Query(ctx, c.o.ErrorQuery)
		if err != nil {
			return drainFailed(got, fmt.Errorf("reading the error queue after %q: %w", after, err))
		}
		e, err := ParseQueueEntry(s)
		if err != nil {
			return drainFailed(got, fmt.Errorf("reading the error queue after %q: %w", after, c.Desync(c.o.ErrorQuery, err)))
		}
		if e.Code == 0 {
			if len(got) == 0 {
				return nil
			}
			return &InstrumentError{Command: after, Code: got[0].Code, Msg: got[0].Msg, More: got[1:]}
		}
		got = append(got, e)
	}
	return &InstrumentError{Command: after, Code: got[0].Code, Msg: got[0].Msg,
		More: append(got[1:], QueueEntry{Code: 0, Msg: fmt.Sprintf("queue not empty after %d reads", c.o.MaxErrors)})}
}

// QueryMatch sends a query and reads reply lines until one satisfies
// accept, discarding the others (a line left over by an earlier exchange,
// or by another process that had the port before), for at most
// SyncTimeout. It returns the accepted line and the lines discarded; when
// none is accepted the error matches link.ErrTimeout and skipped holds
// what the instrument did say.
func (c *Client) QueryMatch(ctx context.Context, cmd string, accept func(string) bool) (line string, skipped []string, err error) {
	if err := c.resync(ctx); err != nil {
		return "", nil, err
	}
	qctx, cancel := context.WithTimeout(ctx, c.o.SyncTimeout)
	defer cancel()
	if _, err := c.s.Write(qctx, []byte(cmd+c.o.WriteTerm)); err != nil {
		c.broke()
		return "", nil, fmt.Errorf("scpi %q: %w", cmd, err)
	}
	for {
		l, err := c.readLine(qctx)
		if err != nil {
			c.broke()
			if ctx.Err() == nil && errors.Is(err, context.DeadlineExceeded) && !errors.Is(err, link.ErrTimeout) {
				err = &link.Error{Op: "read", Port: c.o.Name, Kind: link.ErrTimeout, Cause: fmt.Errorf("no acceptable reply within %v: %w", c.o.SyncTimeout, err)}
			}
			return "", skipped, fmt.Errorf("scpi %q: %w", cmd, err)
		}
		if accept(l) {
			if len(skipped) > 0 {
				c.o.Log.Info("scpi discarded stale reply lines", "instr", c.o.Name, "cmd", cmd, "lines", skipped)
			}
			return l, skipped, nil
		}
		c.salvage(l)
		if len(skipped) < 16 {
			skipped = append(skipped, l)
		}
	}
}

// Identify sends *IDN? and returns the reply.
func (c *Client) Identify(ctx context.Context) (string, error) { return c.Query(ctx, "*IDN?") }

// Reset sends *RST and drains the error queue.
func (c *Client) Reset(ctx context.Context) error { return c.Set(ctx, "*RST") }

// Clear sends *CLS (clears the status registers and the error queue).
func (c *Client) Clear(ctx context.Context) error { return c.Write(ctx, "*CLS") }

// WaitComplete sends *OPC? and checks that the reply is 1.
func (c *Client) WaitComplete(ctx context.Context) error {
	s, err := c.Query(ctx, "*OPC?")
	if err != nil {
		return err
	}
	if v, err := ParseInt(s); err != nil || v != 1 {
		return fmt.Errorf("scpi \"*OPC?\": %w", &ParseError{Reply: s, Want: "1"})
	}
	return nil
}

// EventStatus sends *ESR? and returns the standard event status register.
func (c *Client) EventStatus(ctx context.Context) (int, error) { return c.queryInt(ctx, "*ESR?") }

// StatusByte sends *STB? and returns the status byte.
func (c *Client) StatusByte(ctx context.Context) (int, error) { return c.queryInt(ctx, "*STB?") }

func (c *Client) queryInt(ctx context.Context, cmd string) (int, error) {
	s, err := c.Query(ctx, cmd)
	if err != nil {
		return 0, err
	}
	v, err := ParseInt(s)
	if err != nil {
		return 0, fmt.Errorf("scpi %q: %w", cmd, err)
	}
	return v, nil
}

// Forget drops any buffered input and the record of a broken exchange;
// call it after the stream was reconnected.
func (c *Client) Forget() {
	c.buf = c.buf[:0]
	c.stale = false
	c.asked = nil
}

// readLine returns the next reply line without its terminator.
func (c *Client) readLine(ctx context.Context) (string, error) {
	for {
		if line, ok, err := c.takeLine(); ok || err != nil {
			return line, err
		}
		if err := c.fill(ctx); err != nil {
			return string(c.buf), err
		}
	}
}

// takeLine takes a complete reply line off the buffer (ok false: none yet).
func (c *Client) takeLine() (line string, ok bool, err error) {
	term := []byte(c.o.ReadTerm)
	if i := bytes.Index(c.buf, term); i >= 0 {
		line := string(c.buf[:i])
		c.buf = append(c.buf[:0], c.buf[i+len(term):]...)
		return line, true, nil
	}
	if len(c.buf) > c.o.MaxReply {
		partial := string(c.buf[:80])
		c.buf = c.buf[:0]
		c.broke()
		return partial, false, fmt.Errorf("reply longer than %d bytes without terminator %q", c.o.MaxReply, c.o.ReadTerm)
	}
	return "", false, nil
}

// fill reads once more into the buffer.
func (c *Client) fill(ctx context.Context) error {
	return c.took(c.s.Read(ctx, c.rbuf))
}

// took keeps n bytes read into rbuf; a read error marks the line stale.
func (c *Client) took(n int, err error) error {
	c.buf = append(c.buf, c.rbuf[:n]...)
	if err != nil {
		c.broke()
		if errors.Is(err, io.EOF) {
			return fmt.Errorf("%w: %w", link.ErrDisconnected, err)
		}
		return err
	}
	return nil
}

// DefaultQuiet is how long the line must stay silent before a resync
// takes it as drained.
const DefaultQuiet = 20 * time.Millisecond

// MarkStale records that the line cannot be trusted (a reply did not parse
// for its query, the port was reopened, or a previous process may have left
// replies on it): the next exchange resynchronises first.
func (c *Client) MarkStale() { c.broke() }

// Stale reports whether the next exchange will resynchronise first.
func (c *Client) Stale() bool { return c.stale }

// Breaks returns how many times an exchange broke off and left the line
// to be resynchronised before the next one (a reply lost, late or
// spoiled, a write failed, or a call cut short by its context), counted
// when it broke. Safe to call from any goroutine.
func (c *Client) Breaks() int64 { return c.breaks.Load() }

// salvage keeps line when it is an error-queue entry (`code,"message"`,
// code not 0) found among discarded stale input: a late reply to the
// error query, whose entry the instrument has removed from its queue.
func (c *Client) salvage(line string) {
	if c.o.ErrorQuery == "" || !strings.Contains(line, `,"`) {
		return
	}
	e, err := ParseQueueEntry(line)
	if err != nil || e.Code == 0 {
		return
	}
	c.salvaged = append(c.salvaged, e)
	c.o.Log.Warn("scpi: an error-queue entry found in a late reply is kept", "instr", c.o.Name, "code", e.Code, "msg", e.Msg)
}

// Salvaged returns, and forgets, the error-queue entries found among
// stale input that resyncs discarded (late replies to the error query):
// the instrument removed them from its queue, so a caller that reports the
// queue must report them too.
func (c *Client) Salvaged() []QueueEntry {
	out := c.salvaged
	c.salvaged = nil
	return out
}

// broke records that an exchange broke off: the line is stale.
func (c *Client) broke() {
	if !c.stale {
		c.breaks.Add(1)
	}
	c.stale = true
}

// Resync resynchronises the line now if it is stale (see MarkStale).
func (c *Client) Resync(ctx context.Context) error { return c.resync(ctx) }

// Desync marks the line stale and returns err wrapped as ErrDesync, for a
// reply that does not parse as the answer to cmd.
func (c *Client) Desync(cmd string, err error) error {
	c.broke()
	c.o.Log.Warn("scpi reply does not answer its query: line out of step, resynchronising", "instr", c.o.Name, "cmd", cmd, "err", err)
	return fmt.Errorf("scpi %q: %w: %w", cmd, ErrDesync, err)
}

// Drain discards input until the line has been quiet for Options.Quiet,
// for at most SyncTimeout; it returns how many bytes it discarded.
func (c *Client) Drain(ctx context.Context) (int, error) {
	c.buf = c.buf[:0]
	dctx, cancel := context.WithTimeout(ctx, c.o.SyncTimeout)
	defer cancel()
	return c.drain(dctx)
}

func (c *Client) drain(ctx context.Context) (int, error) {
	discarded := 0
	var junk []byte
	defer func() {
		for _, l := range strings.Split(string(junk), c.o.ReadTerm) {
			c.salvage(l)
		}
	}()
	for {
		if discarded > c.o.MaxReply {
			return discarded, fmt.Errorf("scpi: the instrument keeps sending (%d bytes discarded while resynchronising)", discarded)
		}
		rctx, cancel := context.WithTimeout(ctx, c.o.Quiet)
		n, err := c.s.Read(rctx, c.rbuf)
		cancel()
		discarded += n
		if n > 0 {
			c.o.Log.Debug("scpi discarded stale input", "instr", c.o.Name, "bytes", string(c.rbuf[:n]))
			if len(junk)+n <= c.o.MaxReply {
				junk = append(junk, c.rbuf[:n]...)
			}
		}
		if err != nil {
			if ctx.Err() != nil {
				if errors.Is(ctx.Err(), context.DeadlineExceeded) && !errors.Is(err, context.Canceled) {
					return discarded, &link.Error{Op: "read", Port: c.o.Name, Kind: link.ErrTimeout,
						Cause: fmt.Errorf("the instrument keeps sending: the line never fell quiet for %v within %v (%d bytes discarded)", c.o.Quiet, c.o.SyncTimeout, discarded)}
				}
				return discarded, ctx.Err()
			}
			if errors.Is(err, link.ErrTimeout) {
				return discarded, nil
			}
			if errors.Is(err, io.EOF) {
				return discarded, fmt.Errorf("%w: %w", link.ErrDisconnected, err)
			}
			return discarded, err
		}
	}
}

// resync brings a stale line back in step: it discards input until the
// line is quiet for Options.Quiet, then, with a SyncQuery, sends it and
// discards lines until one satisfies SyncReply (a late reply to an earlier
// query, still on its way, is read and dropped here instead of answering
// the next query). The whole is bounded by SyncTimeout; on failure the line
// stays stale and the error matches link.ErrTimeout (or the transport's
// error).
func (c *Client) resync(ctx context.Context) error {
	c.abandon()
	if !c.stale {
		return nil
	}
	c.buf = c.buf[:0]
	sctx, cancel := context.WithTimeout(ctx, c.o.SyncTimeout)
	defer cancel()
	n, err := c.drain(sctx)
	if err != nil {
		return c.resyncErr(ctx, err)
	}
	if c.o.SyncQuery == "" || c.o.SyncReply == nil {
		c.stale = false
		if n > 0 {
			c.o.Log.Info("scpi line resynchronised (stale input discarded)", "instr", c.o.Name, "bytes", n)
		}
		return nil
	}
	if _, err := c.s.Write(sctx, []byte(c.o.SyncQuery+c.o.WriteTerm)); err != nil {
		return c.resyncErr(ctx, err)
	}
	var skipped []string
	for {
		line, err := c.readLine(sctx)
		if err != nil {
			if len(skipped) > 0 {
				err = fmt.Errorf("%w (lines discarded: %q)", err, skipped)
			}
			return c.resyncErr(ctx, err)
		}
		if c.o.SyncReply(line) {
			break
		}
		c.salvage(line)
		if len(skipped) < 8 {
			skipped = append(skipped, line)
		}
	}
	c.stale = false
	c.o.Log.Info("scpi line resynchronised", "instr", c.o.Name, "sync", c.o.SyncQuery, "stale_bytes", n, "stale_lines", skipped)
	return nil
}

func (c *Client) resyncErr(ctx context.Context, err error) error {
	c.stale = true // still: the break that made it stale is counted
	if ctx.Err() == nil && errors.Is(err, context.DeadlineExceeded) && !errors.Is(err, link.ErrTimeout) {
		err = &link.Error{Op: "read", Port: c.o.Name, Kind: link.ErrTimeout, Cause: err}
	}
	return fmt.Errorf("scpi: resynchronising the line after a broken exchange: %w", err)
}

// DrainError is a drain of the error queue that failed part way: Entries
// were read (and so removed from the instrument's queue) before Err. A
// caller that reads the queue again after a resync must keep them, or they
// are lost for good. It unwraps to Err (a timeout, a desync …).
type DrainError struct {
	Entries []QueueEntry
	Err     error
}

func (e *DrainError) Error() string {
	var b strings.Builder
	for _, q := range e.Entries {
		fmt.Fprintf(&b, "; %d %q", q.Code, q.Msg)
	}
	return fmt.Sprintf("%v (read from the queue before it%s)", e.Err, b.String())
}

func (e *DrainError) Unwrap() error { return e.Err }

// drainFailed is err, carrying got when entries were read before it.
func drainFailed(got []QueueEntry, err error) error {
	if len(got) == 0 {
		return err
	}
	return &DrainError{Entries: got, Err: err}
}
