package sweeps

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
)

// write stores data as the recording i (or, if that name is taken, the next free number in the
// same second), once: to a temporary file, synced, renamed into place, the directory synced.
// It then indexes it with info and drops the oldest recordings beyond the limits. It returns
// info completed with the ID and size.
func (s *Store) write(i id, data []byte, info Info) (Info, error) {
	for s.taken(i) {
		i.n++
	}
	name := i.fileName()
	if err := writeNew(s.dir, name, data); errors.Is(err, errDirSync) {
		s.log.Warn("recording written, but it may not survive a power cut", "file", name, "err", err)
	} else if err != nil {
		return info, fmt.Errorf("sweeps: write %s: %w", name, err)
	}
	info.ID, info.Size = i.String(), int64(len(data))
	s.mu.Lock()
	defer s.mu.Unlock()
	k, _ := slices.BinarySearchFunc(s.entries, i, func(e entry, t id) int { return e.id.compare(t) })
	s.entries = slices.Insert(s.entries, k, entry{id: i, info: info, size: info.Size})
	s.total += info.Size
	s.trimLocked()
	return info, nil
}

// taken says whether recording i exists, in the index or (a file the index skipped) on disk.
func (s *Store) taken(i id) bool {
	s.mu.Lock()
	_, found := slices.BinarySearchFunc(s.entries, i, func(e entry, t id) int { return e.id.compare(t) })
	s.mu.Unlock()
	if found {
		return true
	}
	_, err := os.Lstat(filepath.Join(s.dir, i.fileName()))
	return !errors.Is(err, fs.ErrNotExist)
}

// writeNew writes data to dir/name crash-safely: at every moment the name is either absent or
// the whole file. The caller has made sure that nothing has the name (one writer per directory).
func writeNew(dir, name string, data []byte) (err error) {
	f, err := os.CreateTemp(dir, "."+name+".tmp-*")
	if err != nil {
		return fmt.Errorf("create temporary file: %w", err)
	}
	tmp := f.Name()
	closed := false
	defer func() {
		if err != nil {
			if !closed {
				f.Close()
			}
			os.Remove(tmp) // best effort: Open removes what is left
		}
	}()
	if _, err := f.Write(data); err != nil {
		return fmt.Errorf("write %s: %w", tmp, err)
	}
	if err := f.Sync(); err != nil {
		return fmt.Errorf("sync %s: %w", tmp, err)
	}
	closed = true
	if err := f.Close(); err != nil {
		return fmt.Errorf("close %s: %w", tmp, err)
	}
	if err := os.Rename(tmp, filepath.Join(dir, name)); err != nil {
		return fmt.Errorf("rename %s: %w", tmp, err)
	}
	if err := syncDir(dir); err != nil {
		return fmt.Errorf("%w %s: %w", errDirSync, dir, err)
	}
	return nil
}

// errDirSync: the file is in place and whole, but the directory could not be synced: only its
// survival across a power cut is in doubt.
var errDirSync = errors.New("sync directory")

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	return err
}
