package sweeps

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"slices"

	"github.com/tankd/tankd/controller/store"
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
	// (the temporary name is the one Open recognises as a write killed midway: tempName)
	err := store.WriteNew(filepath.Join(s.dir, name), "."+name+".tmp-*", data)
	if errors.Is(err, store.ErrDirSync) {
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
