//go:build unix

package radio

import (
	"errors"
	"fmt"
	"io"
	"os"
	"syscall"
	"time"

	"github.com/creack/pty"
	"golang.org/x/sys/unix"
	"golang.org/x/term"
)

// PTY is a pseudo-terminal that stands in for the radio's serial port: the CAT server reads and
// writes the master side, and a serial-port client opens the slave device at its path as it
// would /dev/ttyUSB0. The terminal is in raw mode, so that ';'-terminated frames are not held
// back waiting for a line end and nothing is echoed by the line discipline.
//
// The PTY keeps the slave side open itself, so controllers may open and close the device as
// often as they like without the server seeing end of input; Close ends both sides.
type PTY struct {
	master *os.File
	slave  *os.File
	path   string
}

// OpenPTY opens a raw pseudo-terminal and returns its server side and the path of the slave
// device (such as /dev/pts/7) for the client.
func OpenPTY() (p *PTY, path string, err error) {
	m, s, err := pty.Open()
	if err != nil {
		return nil, "", fmt.Errorf("open pty: %w", err)
	}
	path = s.Name()
	// pty.Open leaves the master descriptor in blocking mode, which neither honours deadlines
	// nor lets Close interrupt a pending Read. A non-blocking duplicate goes through the
	// runtime's poller and does both.
	fd, err := unix.FcntlInt(m.Fd(), unix.F_DUPFD_CLOEXEC, 0)
	m.Close()
	if err != nil {
		s.Close()
		return nil, "", fmt.Errorf("open pty %s: duplicate master: %w", path, err)
	}
	if err := unix.SetNonblock(fd, true); err != nil {
		unix.Close(fd)
		s.Close()
		return nil, "", fmt.Errorf("open pty %s: non-blocking master: %w", path, err)
	}
	master := os.NewFile(uintptr(fd), "/dev/ptmx")
	if _, err := term.MakeRaw(int(s.Fd())); err != nil {
		master.Close()
		s.Close()
		return nil, "", fmt.Errorf("open pty %s: raw mode: %w", path, err)
	}
	return &PTY{master: master, slave: s, path: path}, path, nil
}

// Path returns the slave device's path.
func (p *PTY) Path() string { return p.path }

// String implements fmt.Stringer.
func (p *PTY) String() string { return "pty " + p.path }

// Read implements io.Reader on the master side. The kernel reports a hung-up slave as EIO; Read
// reports it as io.EOF, the end of the link.
func (p *PTY) Read(b []byte) (int, error) {
	n, err := p.master.Read(b)
	if errors.Is(err, syscall.EIO) {
		err = io.EOF
	}
	return n, err
}

// Write implements io.Writer on the master side.
func (p *PTY) Write(b []byte) (int, error) { return p.master.Write(b) }

// Close closes both sides; a client that still has the slave open sees a hang-up.
func (p *PTY) Close() error {
	return errors.Join(p.master.Close(), p.slave.Close())
}

// SetDeadline sets the master side's read and write deadlines.
func (p *PTY) SetDeadline(t time.Time) error { return p.master.SetDeadline(t) }

// SetReadDeadline sets the master side's read deadline.
func (p *PTY) SetReadDeadline(t time.Time) error { return p.master.SetReadDeadline(t) }

// SetWriteDeadline sets the master side's write deadline.
func (p *PTY) SetWriteDeadline(t time.Time) error { return p.master.SetWriteDeadline(t) }
