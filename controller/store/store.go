package store

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
)

const (
	// PrevSuffix is appended to a file's path to name its previous good copy.
	PrevSuffix = ".prev"
	// MaxBodySize bounds a body: these are small state files, and ReadFile must not be made to
	// swallow whatever large file happens to sit at the path.
	MaxBodySize = 16 << 20
	// tempInfix names the temporary files a write creates before renaming one into place.
	tempInfix = ".tmp-"
)

// Outcomes of ReadFile and Decode, for errors.Is.
var (
	// ErrCorrupt: no usable copy, and every copy there is (one or both) is corrupt: it fails
	// its checksum (torn, truncated or edited), is larger than MaxBodySize allows, or a Decode
	// parse function rejects its body with an error wrapping ErrCorrupt. Nothing in the files
	// can be used, and the caller may set them aside (SetAside) and start afresh. A copy that
	// could not be read, or whose content a parse function rejects for another reason (a newer
	// format), keeps the error from matching ErrCorrupt.
	ErrCorrupt = errors.New("corrupt file")
	// ErrUsedPrevious: the main copy was missing or unusable, and the data returned with this
	// error came from the previous copy. The data is good; the caller should log the error.
	ErrUsedPrevious = errors.New("using the previous copy")
)

// WriteFile atomically replaces path with body followed by its checksum line: a crash at any
// moment leaves either the complete old file or the complete new one at path. A current file
// whose checksum verifies is first kept as path+PrevSuffix; a corrupt one is not, so it never
// displaces a good previous copy. Temporary files that an earlier, killed write left beside
// path are removed. Files are created with mode 0600. When WriteFile returns nil, the new file
// and the previous copy have been synced to the storage device, directory entries included.
// body must be empty or end in a newline, and be at most MaxBodySize bytes. Only one writer,
// in any process, may write a given path at a time.
func WriteFile(path string, body []byte) error {
	if err := write(osOps{}, path, body); err != nil {
		return fmt.Errorf("store: write %s: %w", path, err)
	}
	return nil
}

// ReadFile returns the body of the file at path, its checksum verified and its checksum line
// removed. If the main copy is missing, unreadable or corrupt and the previous copy is good, it
// returns the previous copy's body together with an error wrapping ErrUsedPrevious (and saying
// what was wrong with the main copy). If neither copy exists (a first run), the error wraps
// fs.ErrNotExist. If no copy is usable, the error says what was wrong with each copy; it wraps
// ErrCorrupt if every copy there is corrupt, and otherwise the reasons (an I/O error, say) of
// those that are not. fs.ErrNotExist is wrapped only when neither copy exists, so that a
// missing file is never mistaken for a first run while a damaged copy lies beside it.
func ReadFile(path string) ([]byte, error) {
	return Decode(path, func(body []byte) ([]byte, error) { return body, nil })
}

// Decode is ReadFile with a parse function that turns a verified body into a value, so that a
// copy whose checksum is good but whose content does not parse also counts as corrupt. parse
// must return an error wrapping ErrCorrupt for content it cannot use: then the previous copy is
// tried, as for a failed checksum. Any other error from parse ends the read with that error and
// no fallback: a file this build does not understand, of a newer format say, must not be passed
// over for an older copy that the next write would then make current; when the main copy is
// unusable and the previous copy is rejected that way, the error wraps the parse error and not
// ErrCorrupt, so that the previous copy is not set aside. parse is called at most once per
// copy, only with verified bodies, and the value it returns is returned as is.
func Decode[T any](path string, parse func(body []byte) (T, error)) (T, error) {
	var zero T
	v, mainErr := decodeCopy(path, parse)
	if mainErr == nil {
		return v, nil
	}
	if f, ok := mainErr.(finalError); ok {
		return zero, fmt.Errorf("store: read %s: %w", path, f.err)
	}
	pv, prevErr := decodeCopy(path+PrevSuffix, parse)
	if prevErr == nil {
		return pv, fmt.Errorf("store: read %s: %w; main copy: %v", path, ErrUsedPrevious, mainErr)
	}
	return zero, fmt.Errorf("store: read %s: %w", path, noUsableCopy(mainErr, unwrapFinal(prevErr)))
}

// finalError marks a parse error that must not lead to the previous copy. decodeCopy returns
// it unwrapped, and it never leaves this package.
type finalError struct{ err error }

func (e finalError) Error() string { return e.err.Error() }

func unwrapFinal(err error) error {
	if f, ok := err.(finalError); ok {
		return f.err
	}
	return err
}

// noUsableCopy says what was wrong with each copy. Only the absence of both matches
// fs.ErrNotExist, and only damage to every copy there is matches ErrCorrupt: a caller told
// ErrCorrupt sets the files aside and starts afresh, which it must not do over a copy that
// could not be read (a wrong permission, an I/O error) or is of a format this build does not
// know.
func noUsableCopy(mainErr, prevErr error) error {
	mainGone, prevGone := errors.Is(mainErr, fs.ErrNotExist), errors.Is(prevErr, fs.ErrNotExist)
	if mainGone && prevGone {
		return mainErr
	}
	damaged := (mainGone || errors.Is(mainErr, ErrCorrupt)) && (prevGone || errors.Is(prevErr, ErrCorrupt))
	return fmt.Errorf("%w; %w", copyReason("main", mainErr, damaged), copyReason("previous", prevErr, damaged))
}

// copyReason says what was wrong with one copy, wrapping the reason only if it may show
// through: never a missing copy's, and damage only when every copy is damaged.
func copyReason(which string, err error, allDamaged bool) error {
	if errors.Is(err, fs.ErrNotExist) || !allDamaged && errors.Is(err, ErrCorrupt) {
		return fmt.Errorf("%s copy: %v", which, err)
	}
	return fmt.Errorf("%s copy: %w", which, err)
}

// decodeCopy reads, verifies and parses one copy.
func decodeCopy[T any](name string, parse func([]byte) (T, error)) (T, error) {
	var zero T
	data, err := readBounded(name)
	if err != nil {
		return zero, err
	}
	body, err := Verify(data)
	if err != nil {
		return zero, err
	}
	v, err := parse(body)
	if err != nil && !errors.Is(err, ErrCorrupt) {
		return zero, finalError{err}
	}
	return v, err
}

// readBounded reads a whole file of at most MaxBodySize bytes of body.
func readBounded(name string) ([]byte, error) {
	f, err := os.Open(name)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	const limit = MaxBodySize + sumLineLen
	data, err := io.ReadAll(io.LimitReader(f, int64(limit)+1))
	if err != nil {
		return nil, err
	}
	if len(data) > limit {
		return nil, fmt.Errorf("%w: larger than %d bytes", ErrCorrupt, limit)
	}
	return data, nil
}

// write replaces the file at path with body and its checksum, keeping a good current file as
// the previous copy. The order matters: the previous copy is made (a hard link, so the current
// file's data is never written to again) before the new data, complete and on disk, is renamed
// over path; at every moment path names a complete file.
func write(ops fileOps, path string, body []byte) error {
	if len(body) > 0 && body[len(body)-1] != '\n' {
		return errors.New("body does not end in a newline")
	}
	if len(body) > MaxBodySize {
		return fmt.Errorf("body of %d bytes is over the limit of %d", len(body), MaxBodySize)
	}
	// A fresh buffer: appending to body itself could write into the caller's array.
	data := AppendChecksum(append(make([]byte, 0, len(body)+sumLineLen), body...))
	dir, base := splitPath(path)
	removeStaleTemps(ops, dir, base)
	// A current copy that cannot be read or verified is not worth keeping, and a good previous
	// copy may already be beside it; either way the new file replaces it.
	if old, err := ops.ReadFile(path); err == nil {
		if _, verr := Verify(old); verr == nil {
			if err := keepPrevious(ops, path, old); err != nil {
				return err
			}
		}
	}
	return replaceFile(ops, dir, base+tempInfix+"*", path, data)
}

func splitPath(path string) (dir, base string) {
	dir, base = filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	return dir, base
}

// keepPrevious makes the current file, old being its verified content, the previous copy, with
// no moment at which there is none once there has been one: the new previous copy is made under
// a temporary name, a hard link so that its data is never written again or, where the
// filesystem has no hard links, a copy made the same atomic way as the file itself, and then
// renamed over the old one. Removing the old one first would leave a gap in which a kill loses
// both. The directory is synced once the file itself has been replaced.
func keepPrevious(ops fileOps, path string, old []byte) error {
	prev := path + PrevSuffix
	dir, base := splitPath(prev)
	// Not os.CreateTemp: a link cannot be made over a file it has created. A name taken all
	// the same (by a writer breaking the one-writer rule) fails the link, and the copy follows.
	tmp := filepath.Join(dir, base+tempInfix+strconv.FormatUint(uint64(rand.Uint32()), 10))
	if err := ops.Link(path, tmp); err != nil {
		if err := replaceFile(ops, dir, base+tempInfix+"*", prev, old); err != nil {
			return fmt.Errorf("keep previous copy: %w", err)
		}
		return nil
	}
	if err := ops.Rename(tmp, prev); err != nil {
		ops.Remove(tmp)
		return fmt.Errorf("keep previous copy: rename %s: %w", tmp, err)
	}
	// Renaming a link over another link of the same file succeeds and does nothing (POSIX
	// rename), leaving tmp: that is the case when a write was killed between this rename and
	// replacing the file. Should this removal fail too, the next write's clean-up takes tmp.
	ops.Remove(tmp)
	return nil
}

// ErrDirSync: the file is in place and whole, but its directory could not be synced: only its
// survival across a power cut is in doubt.
var ErrDirSync = errors.New("sync directory")

// WriteNew writes data, as it is (no checksum line, no previous copy), to path crash-safely: at
// every moment the name holds either what it held before or the whole of data. The temporary
// file is created in path's directory by os.CreateTemp's pattern tempPattern, so that the
// caller can recognise one a killed write left behind. An error wrapping ErrDirSync says that
// the file is in place but the directory could not be synced.
func WriteNew(path, tempPattern string, data []byte) error {
	dir, _ := splitPath(path)
	return replaceFile(osOps{}, dir, tempPattern, path, data)
}

// SyncDir makes the entries of directory dir (files created, renamed or removed in it) durable.
func SyncDir(dir string) error {
	if err := (osOps{}).SyncDir(dir); err != nil {
		return fmt.Errorf("%w %s: %w", ErrDirSync, dir, err)
	}
	return nil
}

// replaceFile writes data to a new temporary file in dir, named by os.CreateTemp's pattern,
// makes it durable, renames it over path, and makes the rename durable.
func replaceFile(ops fileOps, dir, pattern, path string, data []byte) (err error) {
	f, err := ops.CreateTemp(dir, pattern)
	if err != nil {
		return fmt.Errorf("create temporary file: %w", err)
	}
	name := f.Name()
	closed := false
	defer func() {
		if err != nil {
			if !closed {
				f.Close()
			}
			ops.Remove(name)
		}
	}()
	if _, err := f.Write(data); err != nil {
		return fmt.Errorf("write %s: %w", name, err)
	}
	if err := f.Sync(); err != nil {
		return fmt.Errorf("sync %s: %w", name, err)
	}
	closed = true
	if err := f.Close(); err != nil {
		return fmt.Errorf("close %s: %w", name, err)
	}
	if err := ops.Rename(name, path); err != nil {
		return fmt.Errorf("rename %s: %w", name, err)
	}
	if err := ops.SyncDir(dir); err != nil {
		// The new file is in place; only its durability across a power cut is in doubt.
		return fmt.Errorf("%w %s: %w", ErrDirSync, dir, err)
	}
	return nil
}

// removeStaleTemps removes temporary files that an earlier write, killed midway, left behind:
// those of the file itself and those of its previous copy.
func removeStaleTemps(ops fileOps, dir, base string) {
	ents, err := ops.ReadDir(dir)
	if err != nil {
		return
	}
	for _, e := range ents {
		if n := e.Name(); strings.HasPrefix(n, base+tempInfix) || strings.HasPrefix(n, base+PrevSuffix+tempInfix) {
			ops.Remove(filepath.Join(dir, n))
		}
	}
}
