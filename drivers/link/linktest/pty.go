// Package linktest provides pseudo-terminal pairs and a line responder for
// tests that go through the real serial code path (drivers/link over
// go.bug.st/serial) without hardware. Linux only.
package linktest

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"time"

	"golang.org/x/sys/unix"
	"golang.org/x/term"
)

// PTY is one pseudo-terminal pair. Master is the instrument's side
// (non-blocking, so deadlines and Close work); Path is the slave device a
// client opens. The pair keeps its own slave descriptor open so that the
// master never reads EIO between client connections. Close releases both.
type PTY struct {
	Master *os.File
	Path   string
	hold   *os.File
}

// Open creates a pty pair in raw mode (no echo, no line buffering, no
// newline translation), set before anything is written.
func Open() (*PTY, error) {
	fd, err := unix.Open("/dev/ptmx", unix.O_RDWR|unix.O_NOCTTY|unix.O_NONBLOCK|unix.O_CLOEXEC, 0)
	if err != nil {
		return nil, fmt.Errorf("open /dev/ptmx: %w", err)
	}
	if err := unix.IoctlSetPointerInt(fd, unix.TIOCSPTLCK, 0); err != nil {
		unix.Close(fd)
		return nil, fmt.Errorf("unlock pty: %w", err)
	}
	n, err := unix.IoctlGetInt(fd, unix.TIOCGPTN)
	if err != nil {
		unix.Close(fd)
		return nil, fmt.Errorf("pty number: %w", err)
	}
	path := fmt.Sprintf("/dev/pts/%d", n)
	hold, err := os.OpenFile(path, os.O_RDWR|unix.O_NOCTTY, 0)
	if err != nil {
		unix.Close(fd)
		return nil, fmt.Errorf("open %s: %w", path, err)
	}
	if _, err := term.MakeRaw(int(hold.Fd())); err != nil {
		hold.Close()
		unix.Close(fd)
		return nil, fmt.Errorf("raw mode on %s: %w", path, err)
	}
	return &PTY{Master: os.NewFile(uintptr(fd), "/dev/ptmx"), Path: path, hold: hold}, nil
}

// Close closes the master and the held slave descriptor: a client reading
// the slave sees a hang-up.
func (p *PTY) Close() error {
	return errors.Join(p.Master.Close(), p.hold.Close())
}

// Handler answers one command line (terminator removed). reply is written
// back followed by the write terminator when ok; ok false sends nothing.
// It runs when the command line has been read (the reply's text is fixed
// then); the reply goes out when the emulated line says (see ServeLine).
type Handler func(cmd string) (reply string, ok bool)

// Responder serves a Handler on a pty master until Stop.
type Responder struct {
	pty  *PTY
	term string
	h    Handler
	line Timeline
	out  chan outgoing // replies in order, to the writer
	wg   sync.WaitGroup
	stop chan struct{}
	once sync.Once
}

// outgoing is a reply and when its last byte leaves the emulated line.
type outgoing struct {
	text string
	at   time.Time
}

// Serve starts answering lines ending in readTerm on p's master with h,
// replies ending in writeTerm; delay, when positive, is the instrument's
// processing time between a command and its reply. Stop ends it.
func Serve(p *PTY, readTerm, writeTerm string, delay time.Duration, h Handler) *Responder {
	return ServeLine(p, readTerm, writeTerm, delay, 0, h)
}

// ServeLine is Serve on an emulated full-duplex serial line of baud bits
// per second (a pty itself has no line speed), timed by a Timeline: a
// command occupies the instrument's receive line from when its bytes were
// read off the pty (as good as when the client wrote them), a reply starts
// once its command is in (plus delay) and the transmit line is free, and
// is written when its last byte would have left. A reader goroutine stamps
// arrivals and a writer goroutine writes each reply at its absolute time,
// so a late wake-up of the writer does not push the line's timeline back.
// baud 0 emulates no line: replies go out delay after their command (at
// once, from the reader, without a delay either).
func ServeLine(p *PTY, readTerm, writeTerm string, delay time.Duration, baud int, h Handler) *Responder {
	r := &Responder{pty: p, term: writeTerm, h: h, line: Timeline{Baud: baud, Delay: delay},
		out: make(chan outgoing, 64), stop: make(chan struct{})}
	r.wg.Add(2)
	go r.read(readTerm)
	go r.write()
	return r
}

// LineTime is how long n characters take on a line of baud bits per
// second at 10 bits a character (start, 8 data, stop).
func LineTime(n, baud int) time.Duration {
	if baud <= 0 {
		return 0
	}
	return time.Duration(n) * 10 * time.Second / time.Duration(baud)
}

// Timeline is the clock of an emulated full-duplex serial line, as RS-232
// is: the instrument's receive line and its transmit line each carry one
// character at a time, independently. The zero Timeline (with Baud and
// Delay set) has both lines free.
type Timeline struct {
	Baud  int           // bits per second; 0: characters take no time
	Delay time.Duration // the instrument's processing time before a reply
	rx    time.Time     // the receive line is busy until rx
	tx    time.Time     // the transmit line is busy until tx
}

// Command places a command of n characters (terminator included) whose
// first byte reached the line at arrived, and returns when it is fully in.
func (t *Timeline) Command(arrived time.Time, n int) time.Time {
	start := arrived
	if t.rx.After(start) {
		start = t.rx
	}
	t.rx = start.Add(LineTime(n, t.Baud))
	return t.rx
}

// Reply places a reply of n characters (terminator included) to a command
// fully in at in, and returns when its last byte has left the line.
func (t *Timeline) Reply(in time.Time, n int) time.Time {
	start := in.Add(t.Delay)
	if t.tx.After(start) {
		start = t.tx
	}
	t.tx = start.Add(LineTime(n, t.Baud))
	return t.tx
}

// read takes command lines off the master, stamps each with the time its
// first byte was read, answers it and hands the reply to the writer.
func (r *Responder) read(readTerm string) {
	defer r.wg.Done()
	defer close(r.out)
	buf := make([]byte, 512)
	var line strings.Builder
	var first time.Time // when the line's first byte was read
	for {
		select {
		case <-r.stop:
			return
		default:
		}
		r.pty.Master.SetReadDeadline(time.Now().Add(50 * time.Millisecond))
		n, err := r.pty.Master.Read(buf)
		got := time.Now()
		for _, b := range buf[:n] {
			if line.Len() == 0 {
				first = got
			}
			line.WriteByte(b)
			if b != readTerm[len(readTerm)-1] || !strings.HasSuffix(line.String(), readTerm) {
				continue
			}
			cmd := strings.TrimSuffix(line.String(), readTerm)
			line.Reset()
			in := r.line.Command(first, len(cmd)+len(readTerm))
			reply, ok := r.h(cmd)
			if !ok {
				continue
			}
			if r.line.Baud == 0 && r.line.Delay <= 0 {
				// No line and no delay: the reply is due now; written
				// here, as without a writer, it costs no goroutine hop.
				if !r.send(reply + r.term) {
					return
				}
				continue
			}
			select {
			case r.out <- outgoing{text: reply + r.term, at: r.line.Reply(in, len(reply)+len(r.term))}:
			case <-r.stop:
				return
			}
		}
		switch {
		case err == nil || errors.Is(err, os.ErrDeadlineExceeded):
		case errors.Is(err, unix.EIO):
			time.Sleep(5 * time.Millisecond) // no client; wait for one
		default:
			return // master closed
		}
	}
}

// write writes each reply at its time (sleeping until that instant, not
// for a duration, so an oversleep does not add up along the line).
func (r *Responder) write() {
	defer r.wg.Done()
	for o := range r.out {
		if d := time.Until(o.at); d > 0 {
			select {
			case <-time.After(d):
			case <-r.stop:
				return
			}
		}
		if !r.send(o.text) {
			return
		}
	}
}

// send writes text to the master; false when the master is closed.
func (r *Responder) send(text string) bool {
	r.pty.Master.SetWriteDeadline(time.Now().Add(time.Second))
	_, err := r.pty.Master.Write([]byte(text))
	return err == nil || errors.Is(err, unix.EIO)
}

// Stop ends the responder and waits for it. It is safe to call more than
// once, also from a test's cleanup while a hang-up hook is stopping it.
func (r *Responder) Stop() {
	r.once.Do(func() { close(r.stop) })
	r.wg.Wait()
}

// Link is a symlink standing for a stable device name (as in
// /dev/serial/by-id) whose target can be moved to a new pty, the way a USB
// adapter re-enumerates under a new ttyUSB number.
type Link struct{ Path string }

// NewLink makes a symlink named name in dir pointing at target.
func NewLink(dir, name, target string) (*Link, error) {
	l := &Link{Path: filepath.Join(dir, name)}
	return l, os.Symlink(target, l.Path)
}

// Point moves the link to target atomically.
func (l *Link) Point(target string) error {
	tmp := l.Path + ".new"
	os.Remove(tmp)
	if err := os.Symlink(target, tmp); err != nil {
		return err
	}
	return os.Rename(tmp, l.Path)
}
