package store

import (
	"bytes"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
)

// faultOps runs the real filesystem operations, recording each, until the failAt-th, which
// fails; with crash, every later operation fails too, as if the process had died there (no
// clean-up runs). A failing Write first writes half its data, as a torn write would. With
// noLink, Link fails as on a filesystem without hard links.
type faultOps struct {
	osOps
	failAt, n int
	crash     bool
	dead      bool
	noLink    bool
	trace     []string
}

var errInjected = errors.New("injected failure")

// tempName matches the random part of a temporary file's name.
var tempName = regexp.MustCompile(regexp.QuoteMeta(tempInfix) + `[0-9]+`)

func (f *faultOps) step(op string, names ...string) error {
	f.n++
	for _, n := range names {
		op += " " + tempName.ReplaceAllString(filepath.Base(n), tempInfix+"*")
	}
	f.trace = append(f.trace, op)
	if f.dead || f.n == f.failAt {
		f.dead = f.dead || f.crash
		return errInjected
	}
	return nil
}

type faultFile struct {
	tempFile
	ops *faultOps
}

func (f faultFile) Write(b []byte) (int, error) {
	if err := f.ops.step("write"); err != nil {
		n, _ := f.tempFile.Write(b[:len(b)/2])
		return n, err
	}
	return f.tempFile.Write(b)
}

func (f faultFile) Sync() error {
	if err := f.ops.step("sync"); err != nil {
		return err
	}
	return f.tempFile.Sync()
}

func (f faultFile) Close() error {
	if err := f.ops.step("close"); err != nil {
		f.tempFile.Close() // the descriptor goes with the process either way
		return err
	}
	return f.tempFile.Close()
}

func (f *faultOps) ReadDir(name string) ([]fs.DirEntry, error) {
	if err := f.step("readdir"); err != nil {
		return nil, err
	}
	return f.osOps.ReadDir(name)
}

func (f *faultOps) CreateTemp(dir, pattern string) (tempFile, error) {
	if err := f.step("create", pattern); err != nil {
		return nil, err
	}
	t, err := f.osOps.CreateTemp(dir, pattern)
	if err != nil {
		return nil, err
	}
	return faultFile{t, f}, nil
}

func (f *faultOps) ReadFile(name string) ([]byte, error) {
	if err := f.step("read", name); err != nil {
		return nil, err
	}
	return f.osOps.ReadFile(name)
}

func (f *faultOps) Remove(name string) error {
	if err := f.step("remove", name); err != nil {
		return err
	}
	return f.osOps.Remove(name)
}

func (f *faultOps) Link(o, n string) error {
	if err := f.step("link", o, n); err != nil {
		return err
	}
	if f.noLink {
		return &fs.PathError{Op: "link", Path: n, Err: errors.ErrUnsupported}
	}
	return f.osOps.Link(o, n)
}

func (f *faultOps) Lstat(name string) (fs.FileInfo, error) {
	if err := f.step("lstat", name); err != nil {
		return nil, err
	}
	return f.osOps.Lstat(name)
}

func (f *faultOps) Rename(o, n string) error {
	if err := f.step("rename", o, n); err != nil {
		return err
	}
	return f.osOps.Rename(o, n)
}

func (f *faultOps) SyncDir(dir string) error {
	if err := f.step("syncdir"); err != nil {
		return err
	}
	return f.osOps.SyncDir(dir)
}

// The order of a write's steps is what makes it safe: the new previous copy is complete under
// a temporary name before it replaces the old one, and exists before the rename of the new
// file; the data is synced before that rename, and the directory after it.
func TestWriteStepOrder(t *testing.T) {
	newFile := []string{"create state.tmp-*", "write", "sync", "close", "rename state.tmp-* state", "syncdir"}
	for _, tc := range []struct {
		name   string
		noLink bool
		writes int
		want   []string
	}{
		{"first write", false, 0, slices.Concat([]string{"readdir", "read state"}, newFile)},
		{"replacing", false, 1, slices.Concat(
			[]string{"readdir", "read state", "link state state.prev.tmp-*",
				"rename state.prev.tmp-* state.prev", "remove state.prev.tmp-*"},
			newFile)},
		{"replacing without hard links", true, 1, slices.Concat(
			[]string{"readdir", "read state", "link state state.prev.tmp-*",
				"create state.prev.tmp-*", "write", "sync", "close", "rename state.prev.tmp-* state.prev", "syncdir"},
			newFile)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "state")
			for range tc.writes {
				mustWrite(t, path, lines("a", 1))
			}
			ops := &faultOps{noLink: tc.noLink}
			if err := write(ops, path, lines("b", 1)); err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(ops.trace, tc.want) {
				t.Fatalf("steps:\n%s\nwant:\n%s", strings.Join(ops.trace, "\n"), strings.Join(tc.want, "\n"))
			}
		})
	}
}

// A write that fails (or dies) at any one of its steps leaves a readable file, the old body or
// the new one, and no fallback is needed, and a good previous copy beside it; the next write
// then succeeds, keeps a good previous copy and leaves no temporary files behind.
func TestWriteFailureAtEveryStep(t *testing.T) {
	older, old, newer := lines("older", 4), lines("old", 5), lines("new", 6)
	for _, mode := range []struct {
		name          string
		crash, noLink bool
	}{
		{"error", false, false},
		{"crash", true, false},
		{"error without hard links", false, true},
		{"crash without hard links", true, true},
	} {
		t.Run(mode.name, func(t *testing.T) {
			// Count the steps of a write that does not fail.
			count := &faultOps{noLink: mode.noLink}
			path := filepath.Join(t.TempDir(), "state")
			twoWrites(t, path, older, old)
			if err := write(count, path, newer); err != nil {
				t.Fatal(err)
			}
			for failAt := 1; failAt <= count.n; failAt++ {
				at := fmt.Sprintf("fault at step %d (%s)", failAt, count.trace[failAt-1])
				dir := t.TempDir()
				path := filepath.Join(dir, "state")
				twoWrites(t, path, older, old)
				ops := &faultOps{failAt: failAt, crash: mode.crash, noLink: mode.noLink}
				writeErr := write(ops, path, newer)

				got, err := ReadFile(path)
				if err != nil {
					t.Fatalf("%s: ReadFile = %v", at, err)
				}
				// There was a previous copy before the write, so there must be one after it,
				// however it ended: the one before, or the file the write replaced.
				prev, err := os.ReadFile(path + PrevSuffix)
				if err != nil {
					t.Fatalf("%s (write: %v): no previous copy: %v", at, writeErr, err)
				}
				if body, err := Verify(prev); err != nil || !bytes.Equal(body, older) && !bytes.Equal(body, old) {
					t.Fatalf("%s (write: %v): previous copy = %q, %v; want the older body or the old", at, writeErr, body, err)
				}
				switch {
				case bytes.Equal(got, newer):
				case bytes.Equal(got, old) && writeErr != nil:
				default:
					t.Fatalf("%s (write: %v): read %q, neither the old body nor the new", at, writeErr, got)
				}
				// A failed hard link is survived by copying, an unreadable current file by not
				// keeping it; any other fault is reported, as itself.
				if writeErr != nil && !errors.Is(writeErr, errInjected) {
					t.Fatalf("%s: write error %v does not wrap the fault", at, writeErr)
				}

				mustWrite(t, path, newer)
				if got, err := ReadFile(path); err != nil || !bytes.Equal(got, newer) {
					t.Fatalf("%s: after a clean write: %q, %v", at, got, err)
				}
				prev, err = os.ReadFile(path + PrevSuffix)
				if err != nil {
					t.Fatalf("%s: no previous copy after a clean write: %v", at, err)
				}
				if body, err := Verify(prev); err != nil || !bytes.Equal(body, old) && !bytes.Equal(body, newer) {
					t.Fatalf("%s: previous copy after a clean write = %q, %v", at, body, err)
				}
				ents, err := os.ReadDir(dir)
				if err != nil {
					t.Fatal(err)
				}
				for _, e := range ents {
					if strings.Contains(e.Name(), tempInfix) {
						t.Fatalf("%s: %s left behind", at, e.Name())
					}
				}
			}
		})
	}
}
