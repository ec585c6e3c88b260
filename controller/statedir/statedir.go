package statedir

import (
	"bytes"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"

	"github.com/tankd/tankd/controller/store"
)

// The files of a state directory, by name. Dir's methods give their paths.
const (
	MapFile         = "loop.map"   // the memory map (controller/memmap)
	CalibrationFile = "backlash"   // the backlash calibration (controller/tune)
	MarkerFile      = "clean-stop" // the clean-stop marker (WriteMarker, TakeMarker)
	LockFile        = "lock"       // the lock; holds the holder's process ID
)

// ErrLocked is wrapped by Open's error when another Open, in this process or another, holds the
// directory. The error names the holder's process ID, as its lock file gives it.
var ErrLocked = errors.New("locked")

// Options are Open's options. The zero value is the default.
type Options struct {
	// MustExist makes Open fail, with an error wrapping fs.ErrNotExist, when the directory is
	// missing, instead of creating it: for a directory that systemd (StateDirectory=) or a
	// mount provides, whose absence means something is wrong that an empty directory would
	// hide.
	MustExist bool
}

// Dir is an open, locked state directory.
type Dir struct {
	path string
	lock *os.File // nil once closed
}

// Open opens the state directory dir, creating it with mode 0700 (and any missing parents) if
// it is missing and o allows, and locks it against every other Open, in this process or
// another, until Close or the process's exit. If the directory is held already, Open fails at
// once with an error wrapping ErrLocked that names the holder's process ID and the directory.
func Open(dir string, o Options) (*Dir, error) {
	if dir == "" {
		return nil, errors.New("statedir: open: no directory given")
	}
	// Before anything is created: better no daemon than two on one directory unguarded.
	if err := lockingSupported(); err != nil {
		return nil, fmt.Errorf("statedir: open %s: %w", dir, err)
	}
	if err := prepare(dir, o.MustExist); err != nil {
		return nil, fmt.Errorf("statedir: open %s: %w", dir, err)
	}
	lockPath := filepath.Join(dir, LockFile)
	f, err := os.OpenFile(lockPath, os.O_RDWR|os.O_CREATE, 0o600)
	if err != nil {
		return nil, fmt.Errorf("statedir: open %s: %w", dir, err)
	}
	if err := lockFile(f); err != nil {
		f.Close()
		if errors.Is(err, errHeld) {
			return nil, fmt.Errorf("statedir: %w: state directory %s is in use by %s", ErrLocked, dir, holder(lockPath))
		}
		return nil, fmt.Errorf("statedir: lock %s: %w", lockPath, err)
	}
	if err := writePID(f, os.Getpid()); err != nil {
		unlockFile(f)
		f.Close()
		return nil, fmt.Errorf("statedir: write %s: %w", lockPath, err)
	}
	return &Dir{path: dir, lock: f}, nil
}

// prepare makes sure dir is a directory, creating it if it is missing and may be created.
func prepare(dir string, mustExist bool) error {
	st, err := os.Stat(dir)
	switch {
	case err == nil && !st.IsDir():
		return fmt.Errorf("%s is not a directory", dir)
	case err == nil:
		return nil
	case !errors.Is(err, fs.ErrNotExist) || mustExist:
		return err
	}
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return err
	}
	// The new directory's entry in its parent is made durable as store makes its files':
	// otherwise a power cut could take the directory, and every file saved in it, away.
	return store.SyncDir(filepath.Dir(dir))
}

// writePID puts pid in the lock file, for the error of an Open that finds the directory held.
// It writes before it truncates, so that a reader sees the new first line or the old one, never
// an empty file.
func writePID(f *os.File, pid int) error {
	line := strconv.AppendInt(nil, int64(pid), 10)
	line = append(line, '\n')
	if _, err := f.WriteAt(line, 0); err != nil {
		return err
	}
	return f.Truncate(int64(len(line)))
}

// holder says who holds the lock, from the process ID in its lock file.
func holder(lockPath string) string {
	data, err := os.ReadFile(lockPath)
	if err != nil {
		return "another process (its lock file is unreadable: " + err.Error() + ")"
	}
	first, _, _ := bytes.Cut(data, []byte{'\n'})
	pid, err := strconv.Atoi(string(first))
	if err != nil || pid <= 0 {
		// The holder has locked the file and not yet written its PID, or is not a tankd.
		return "another process (its lock file " + lockPath + " names none)"
	}
	return "process " + strconv.Itoa(pid)
}

// Close releases the lock. Later calls do nothing and return nil. The files in the directory
// must not be written after Close: another daemon may hold the directory by then.
func (d *Dir) Close() error {
	f := d.lock
	if f == nil {
		return nil
	}
	d.lock = nil
	// The PID goes while the lock is still held: once it is released, the file may already
	// name the next holder.
	err := f.Truncate(0)
	if uerr := unlockFile(f); err == nil {
		err = uerr
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("statedir: close %s: %w", d.path, err)
	}
	return nil
}

// Path is the directory, as given to Open.
func (d *Dir) Path() string { return d.path }

// MapPath is the path of the memory map file.
func (d *Dir) MapPath() string { return filepath.Join(d.path, MapFile) }

// CalibrationPath is the path of the backlash calibration file.
func (d *Dir) CalibrationPath() string { return filepath.Join(d.path, CalibrationFile) }

// MarkerPath is the path of the clean-stop marker.
func (d *Dir) MarkerPath() string { return filepath.Join(d.path, MarkerFile) }

// LockPath is the path of the lock file.
func (d *Dir) LockPath() string { return filepath.Join(d.path, LockFile) }

// errClosed is wrapped by the errors of methods called after Close.
var errClosed = fmt.Errorf("state directory closed: %w", os.ErrClosed)

func (d *Dir) checkOpen() error {
	if d.lock == nil {
		return errClosed
	}
	return nil
}
