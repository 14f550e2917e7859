// Package linktest provides pseudo-terminal pairs and a line responder for
// tests that go through the real serial code path (drivers/link over
// go.bug.st/serial) without hardware. Linux only.
package linktest

import (
	"bufio"
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
type Handler func(cmd string) (reply string, ok bool)

// Responder serves a Handler on a pty master until Stop.
type Responder struct {
	pty   *PTY
	term  string
	h     Handler
	delay time.Duration
	baud  int
	wg    sync.WaitGroup
	stop  chan struct{}
	once  sync.Once
}

// Serve starts answering lines ending in readTerm on p's master with h,
// replies ending in writeTerm; delay, when positive, is waited before each
// reply (an instrument's processing time). Stop ends it.
func Serve(p *PTY, readTerm, writeTerm string, delay time.Duration, h Handler) *Responder {
	return ServeLine(p, readTerm, writeTerm, delay, 0, h)
}

// ServeLine is Serve on an emulated serial line of baud bits per second
// (a pty itself has no line speed): before each reply it also waits the time
// the command and the reply, terminators included, take on the line at 10
// bits a character (start, 8 data, stop). baud 0 emulates no line.
func ServeLine(p *PTY, readTerm, writeTerm string, delay time.Duration, baud int, h Handler) *Responder {
	r := &Responder{pty: p, term: writeTerm, h: h, delay: delay, baud: baud, stop: make(chan struct{})}
	r.wg.Add(1)
	go r.loop(readTerm)
	return r
}

// LineTime is how long n characters take on a line of baud bits per
// second at 10 bits a character.
func LineTime(n, baud int) time.Duration {
	if baud <= 0 {
		return 0
	}
	return time.Duration(n) * 10 * time.Second / time.Duration(baud)
}

func (r *Responder) loop(readTerm string) {
	defer r.wg.Done()
	br := bufio.NewReader(r.pty.Master)
	last := readTerm[len(readTerm)-1]
	var line strings.Builder
	for {
		select {
		case <-r.stop:
			return
		default:
		}
		r.pty.Master.SetReadDeadline(time.Now().Add(50 * time.Millisecond))
		b, err := br.ReadByte()
		if err != nil {
			if errors.Is(err, os.ErrDeadlineExceeded) || errors.Is(err, unix.EIO) {
				if errors.Is(err, unix.EIO) {
					time.Sleep(5 * time.Millisecond) // no client; wait for one
				}
				continue
			}
			return // master closed
		}
		line.WriteByte(b)
		if b != last || !strings.HasSuffix(line.String(), readTerm) {
			continue
		}
		cmd := strings.TrimSuffix(line.String(), readTerm)
		line.Reset()
		reply, ok := r.h(cmd)
		if !ok {
			continue
		}
		if wait := r.delay + LineTime(len(cmd)+len(readTerm)+len(reply)+len(r.term), r.baud); wait > 0 {
			time.Sleep(wait)
		}
		r.pty.Master.SetWriteDeadline(time.Now().Add(time.Second))
		if _, err := r.pty.Master.Write([]byte(reply + r.term)); err != nil && !errors.Is(err, unix.EIO) {
			return
		}
	}
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
