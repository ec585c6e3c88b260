package store

import (
	"errors"
	"fmt"
	"io/fs"
	"strconv"
	"time"
)

const (
	// damagedInfix and damagedTime name a copy set aside: path+damagedInfix+the time, in UTC.
	damagedInfix = ".damaged-"
	damagedTime  = "20060102T150405Z"
	// maxAsideNames bounds the names tried for one copy when earlier ones are taken: more than
	// anyone sets aside in one second.
	maxAsideNames = 100
)

// SetAside moves the file at path and its previous copy, whichever of them exist, out of the
// way, for when ReadFile or Decode reports that neither can be used (an error wrapping
// ErrCorrupt): path becomes path+".damaged-20260102T150405Z", now in UTC, and its previous
// copy path+PrevSuffix+".damaged-20260102T150405Z"; should such a name be taken already, "-2",
// "-3"… follow it. SetAside never writes over a file and never deletes one: the damaged data
// stays for inspection under the new names, which it returns, and the next WriteFile starts
// afresh without mistaking a damaged file for a previous copy. With neither copy there it
// returns no names and no error. The directory is synced before it returns nil. After an error
// the names returned are those already moved; a copy may then be found under both its old name
// and its new one, a link of one file, never lost.
func SetAside(path string, now time.Time) ([]string, error) {
	moved, err := setAside(osOps{}, path, now)
	if err != nil {
		return moved, fmt.Errorf("store: set aside %s: %w", path, err)
	}
	return moved, nil
}

func setAside(ops fileOps, path string, now time.Time) ([]string, error) {
	stamp := damagedInfix + now.UTC().Format(damagedTime)
	var moved []string
	// The main copy first: should the process die between the two, the previous copy left is
	// as damaged as before, and the read after the restart says so again.
	for _, name := range []string{path, path + PrevSuffix} {
		to, err := moveAside(ops, name, stamp)
		if to != "" {
			moved = append(moved, to)
		}
		if err != nil {
			return moved, err
		}
	}
	if len(moved) > 0 {
		dir, _ := splitPath(path)
		if err := ops.SyncDir(dir); err != nil {
			return moved, fmt.Errorf("sync directory %s: %w", dir, err)
		}
	}
	return moved, nil
}

// moveAside gives name the first free name of name+stamp, name+stamp+"-2", …, and returns it,
// or "" if there is no file at name. rename(2) would replace a file at the new name, so the
// new name is made a hard link, which fails if it is taken, and the old name is then removed.
// Where there are no hard links (or name is a directory), the file is renamed to a name that
// was checked to be free: one writer per path, as for WriteFile, makes that check hold.
func moveAside(ops fileOps, name, stamp string) (string, error) {
	for i := 1; i <= maxAsideNames; i++ {
		to := name + stamp
		if i > 1 {
			to += "-" + strconv.Itoa(i)
		}
		err := ops.Link(name, to)
		switch {
		case err == nil:
			if err := ops.Remove(name); err != nil {
				return to, fmt.Errorf("remove %s, now also %s: %w", name, to, err)
			}
			return to, nil
		case errors.Is(err, fs.ErrNotExist):
			return "", nil
		case errors.Is(err, fs.ErrExist):
			continue
		}
		switch _, err := ops.Lstat(to); {
		case err == nil:
			continue
		case !errors.Is(err, fs.ErrNotExist):
			return "", fmt.Errorf("check %s is free: %w", to, err)
		}
		if err := ops.Rename(name, to); err != nil {
			if errors.Is(err, fs.ErrNotExist) {
				return "", nil
			}
			return "", fmt.Errorf("rename %s: %w", name, err)
		}
		return to, nil
	}
	return "", fmt.Errorf("%s: %s and the %d names after it are all taken", name, name+stamp, maxAsideNames-1)
}

// Remove removes the file at path, its previous copy and any temporary files a killed write
// left beside them, and syncs the directory, so that once it returns nil the file stays gone
// across a power cut. The previous copy goes first: a crash midway leaves the file as it was,
// never its previous copy alone to be read in its place. Files already missing are not an
// error. The one-writer rule of WriteFile covers Remove too.
func Remove(path string) error {
	if err := remove(osOps{}, path); err != nil {
		return fmt.Errorf("store: remove %s: %w", path, err)
	}
	return nil
}

func remove(ops fileOps, path string) error {
	dir, base := splitPath(path)
	removeStaleTemps(ops, dir, base)
	for _, name := range []string{path + PrevSuffix, path} {
		if err := ops.Remove(name); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return err
		}
	}
	if err := ops.SyncDir(dir); err != nil {
		return fmt.Errorf("sync directory %s: %w", dir, err)
	}
	return nil
}
