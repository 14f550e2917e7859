package sim

import (
	"fmt"
	"os"

	"golang.org/x/sys/unix"
	"golang.org/x/term"
)

// pty is one pseudo-terminal pair. The master is non-blocking and registered
// with the runtime poller, so read deadlines and Close work on it. The bench
// keeps its own slave fd open so that clients closing the port never hang
// the master up.
type pty struct {
	master *os.File
	slave  *os.File // the bench's own slave fd
	path   string   // /dev/pts/N, what clients open
}

// openPty creates a pair, unlocks it and makes it raw (no echo, no line
// buffering, no newline translation) before anything is written.
func openPty() (*pty, error) {
	fd, err := unix.Open("/dev/ptmx", unix.O_RDWR|unix.O_NOCTTY|unix.O_NONBLOCK|unix.O_CLOEXEC, 0)
	if err != nil {
		return nil, fmt.Errorf("open /dev/ptmx: %w", err)
	}
	if err := unix.IoctlSetPointerInt(fd, unix.TIOCSPTLCK, 0); err != nil {
		unix.Close(fd)
		return nil, fmt.Errorf("unlock pty: %w", err)
	}
	n, err := unix.IoctlGetUint32(fd, unix.TIOCGPTN)
	if err != nil {
		unix.Close(fd)
		return nil, fmt.Errorf("pty number: %w", err)
	}
	p := &pty{master: os.NewFile(uintptr(fd), "/dev/ptmx"), path: fmt.Sprintf("/dev/pts/%d", n)}
	if err := p.openSlave(); err != nil {
		p.master.Close()
		return nil, err
	}
	return p, nil
}

// openSlave opens the bench's own slave fd and puts the line into raw mode.
func (p *pty) openSlave() error {
	s, err := os.OpenFile(p.path, os.O_RDWR|unix.O_NOCTTY, 0)
	if err != nil {
		return fmt.Errorf("open %s: %w", p.path, err)
	}
	if _, err := term.MakeRaw(int(s.Fd())); err != nil {
		s.Close()
		return fmt.Errorf("raw mode on %s: %w", p.path, err)
	}
	p.slave = s
	return nil
}

// hangup hangs up every open file of the slave side, as an unplugged adapter
// or a dropped modem line would: clients' reads end and writes fail, and
// they must reopen the path, which keeps working. It needs CAP_SYS_ADMIN
// (TIOCVHANGUP); the bench's own slave fd is reopened afterwards.
func (p *pty) hangup() error {
	err := unix.IoctlSetInt(int(p.slave.Fd()), unix.TIOCVHANGUP, 0)
	p.slave.Close()
	if rerr := p.openSlave(); rerr != nil && err == nil {
		err = rerr
	}
	if err != nil {
		return fmt.Errorf("hang up %s: %w", p.path, err)
	}
	return nil
}

// unread returns how many bytes clients wrote that the bench has not read
// yet (FIONREAD on the master); 0 when it cannot tell.
func (p *pty) unread() int {
	// Not p.master.Fd(): that would make the master blocking.
	rc, err := p.master.SyscallConn()
	if err != nil {
		return 0
	}
	n := 0
	rc.Control(func(fd uintptr) {
		if v, err := unix.IoctlGetInt(int(fd), unix.TIOCINQ); err == nil {
			n = v
		}
	})
	return n
}

// closeMaster closes the master; a blocked master read returns
// os.ErrClosed and the slave path goes away once the slave fd is closed.
func (p *pty) closeMaster() error { return p.master.Close() }

// closeSlave closes the bench's own slave fd; call it only after the
// serving goroutine (which may reopen it on a hang-up) has ended.
func (p *pty) closeSlave() {
	if p.slave != nil {
		p.slave.Close()
	}
}
