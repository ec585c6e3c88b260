//go:build unix && !aix

package statedir

import (
	"errors"
	"os"

	"golang.org/x/sys/unix"
)

// lockingSupported says whether this system has flock(2): here it has.
func lockingSupported() error { return nil }

// errHeld is lockFile's error when another open file holds the lock.
var errHeld = errors.New("lock held")

// lockFile takes an exclusive flock on f without waiting. A flock belongs to the open file,
// not the process: a second open of the same file conflicts even in the same process, and the
// kernel drops the lock when the last descriptor of the open file closes, at exit too.
func lockFile(f *os.File) error {
	return control(f, func(fd int) error {
		err := unix.Flock(fd, unix.LOCK_EX|unix.LOCK_NB)
		if errors.Is(err, unix.EWOULDBLOCK) {
			return errHeld
		}
		return err
	})
}

func unlockFile(f *os.File) error {
	return control(f, func(fd int) error { return unix.Flock(fd, unix.LOCK_UN) })
}

// control runs fn on f's descriptor. Unlike f.Fd(), it leaves the descriptor's mode alone.
func control(f *os.File, fn func(fd int) error) error {
	rc, err := f.SyscallConn()
	if err != nil {
		return err
	}
	var ferr error
	if err := rc.Control(func(fd uintptr) { ferr = fn(int(fd)) }); err != nil {
		return err
	}
	return ferr
}
