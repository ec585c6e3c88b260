package store

import (
	"bytes"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"
)

// asideAt is the time the set-aside tests pass: an hour east of UTC, so that the names must
// show it converted.
var asideAt = time.Date(2026, 1, 2, 15, 4, 5, 999, time.FixedZone("UTC+1", 3600))

// asideStamp is asideAt as the names show it: 15:04:05 at UTC+1 is 14:04:05 UTC.
const asideStamp = ".damaged-20260102T140405Z"

// snapshot maps every file name in dir to its content; a directory maps to "dir".
func snapshot(t *testing.T, dir string) map[string]string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	files := map[string]string{}
	for _, e := range ents {
		if e.IsDir() {
			files[e.Name()] = "dir"
			continue
		}
		data, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		files[e.Name()] = string(data)
	}
	return files
}

func TestSetAside(t *testing.T) {
	mainData, prevData := "torn main", "torn previous"
	for _, tc := range []struct {
		name   string
		noLink bool
		before map[string]string // the directory before
		want   map[string]string // the directory after
		moved  []string          // the names SetAside returns
	}{
		{"both", false,
			map[string]string{"state": mainData, "state.prev": prevData},
			map[string]string{"state" + asideStamp: mainData, "state.prev" + asideStamp: prevData},
			[]string{"state" + asideStamp, "state.prev" + asideStamp}},
		{"main only", false,
			map[string]string{"state": mainData},
			map[string]string{"state" + asideStamp: mainData},
			[]string{"state" + asideStamp}},
		{"previous only", false,
			map[string]string{"state.prev": prevData},
			map[string]string{"state.prev" + asideStamp: prevData},
			[]string{"state.prev" + asideStamp}},
		{"neither", false, map[string]string{}, map[string]string{}, nil},
		{"names taken", false,
			map[string]string{"state": mainData, "state.prev": prevData,
				"state" + asideStamp: "earlier", "state" + asideStamp + "-2": "earlier 2",
				"state.prev" + asideStamp: "earlier previous"},
			map[string]string{"state" + asideStamp + "-3": mainData, "state.prev" + asideStamp + "-2": prevData,
				"state" + asideStamp: "earlier", "state" + asideStamp + "-2": "earlier 2",
				"state.prev" + asideStamp: "earlier previous"},
			[]string{"state" + asideStamp + "-3", "state.prev" + asideStamp + "-2"}},
		{"without hard links", true,
			map[string]string{"state": mainData, "state.prev": prevData, "state" + asideStamp: "earlier"},
			map[string]string{"state" + asideStamp + "-2": mainData, "state.prev" + asideStamp: prevData,
				"state" + asideStamp: "earlier"},
			[]string{"state" + asideStamp + "-2", "state.prev" + asideStamp}},
		{"main a directory", false,
			map[string]string{"state": "dir", "state.prev": prevData},
			map[string]string{"state" + asideStamp: "dir", "state.prev" + asideStamp: prevData},
			[]string{"state" + asideStamp, "state.prev" + asideStamp}},
		{"others left alone", false,
			map[string]string{"state": mainData, "state.tmp-1": "temp", "other": "x", "other.prev": "y"},
			map[string]string{"state" + asideStamp: mainData, "state.tmp-1": "temp", "other": "x", "other.prev": "y"},
			[]string{"state" + asideStamp}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			for n, data := range tc.before {
				var err error
				if data == "dir" {
					err = os.Mkdir(filepath.Join(dir, n), 0o700)
				} else {
					err = os.WriteFile(filepath.Join(dir, n), []byte(data), 0o600)
				}
				if err != nil {
					t.Fatal(err)
				}
			}
			path := filepath.Join(dir, "state")
			ops := &faultOps{noLink: tc.noLink}
			moved, err := setAside(ops, path, asideAt)
			if err != nil {
				t.Fatal(err)
			}
			if got := snapshot(t, dir); !mapsEqual(got, tc.want) {
				t.Fatalf("after SetAside the directory holds %v, want %v", got, tc.want)
			}
			var want []string
			for _, n := range tc.moved {
				want = append(want, filepath.Join(dir, n))
			}
			if !slices.Equal(moved, want) {
				t.Fatalf("SetAside returned %q, want %q", moved, want)
			}
			if len(moved) > 0 && ops.trace[len(ops.trace)-1] != "syncdir" {
				t.Fatalf("SetAside's last step is %q, not syncing the directory", ops.trace[len(ops.trace)-1])
			}
			if _, err := ReadFile(path); !errors.Is(err, fs.ErrNotExist) {
				t.Fatalf("ReadFile after SetAside = %v, want fs.ErrNotExist", err)
			}
		})
	}
}

func mapsEqual(a, b map[string]string) bool {
	if len(a) != len(b) {
		return false
	}
	for k, v := range a {
		if w, ok := b[k]; !ok || w != v {
			return false
		}
	}
	return true
}

// SetAside failing or dying at any step loses nothing and overwrites nothing: every file there
// was is still there, by its old name or a new one, and files of the names it would have
// wanted keep their content. Run again, it finishes the job.
func TestSetAsideFailureAtEveryStep(t *testing.T) {
	before := map[string]string{"state": "torn main", "state.prev": "torn previous",
		"state" + asideStamp: "set aside earlier"}
	setup := func(t *testing.T) (string, string) {
		dir := t.TempDir()
		for n, data := range before {
			if err := os.WriteFile(filepath.Join(dir, n), []byte(data), 0o600); err != nil {
				t.Fatal(err)
			}
		}
		return dir, filepath.Join(dir, "state")
	}
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
			count := &faultOps{noLink: mode.noLink}
			_, path := setup(t)
			if _, err := setAside(count, path, asideAt); err != nil {
				t.Fatal(err)
			}
			for failAt := 1; failAt <= count.n; failAt++ {
				at := fmt.Sprintf("fault at step %d (%s)", failAt, count.trace[failAt-1])
				dir, path := setup(t)
				ops := &faultOps{failAt: failAt, crash: mode.crash, noLink: mode.noLink}
				moved, err := setAside(ops, path, asideAt)
				if err != nil && !errors.Is(err, errInjected) {
					t.Fatalf("%s: error %v does not wrap the fault", at, err)
				}
				after := snapshot(t, dir)
				if after["state"+asideStamp] != before["state"+asideStamp] {
					t.Fatalf("%s: a file set aside earlier became %q", at, after["state"+asideStamp])
				}
				for n, data := range before {
					found := false
					for m, d := range after {
						found = found || d == data && strings.HasPrefix(m, n)
					}
					if !found {
						t.Fatalf("%s: %s (%q) is gone: %v", at, n, data, after)
					}
				}
				for _, m := range moved {
					if _, ok := after[filepath.Base(m)]; !ok {
						t.Fatalf("%s: SetAside returned %s, which does not exist", at, m)
					}
				}
				if _, err := setAside(osOps{}, path, asideAt); err != nil {
					t.Fatalf("%s: SetAside again: %v", at, err)
				}
				after = snapshot(t, dir)
				if _, ok := after["state"]; ok {
					t.Fatalf("%s: main copy still there after SetAside again: %v", at, after)
				}
				if _, ok := after["state.prev"]; ok {
					t.Fatalf("%s: previous copy still there after SetAside again: %v", at, after)
				}
			}
		})
	}
}

func TestRemove(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "state")
	twoWrites(t, path, lines("a", 1), lines("b", 1))
	for _, n := range []string{"state.tmp-1", "state.prev.tmp-2", "other"} {
		if err := os.WriteFile(filepath.Join(dir, n), []byte("x"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	ops := &faultOps{}
	if err := remove(ops, path); err != nil {
		t.Fatal(err)
	}
	if got := snapshot(t, dir); !mapsEqual(got, map[string]string{"other": "x"}) {
		t.Fatalf("after Remove the directory holds %v", got)
	}
	if ops.trace[len(ops.trace)-1] != "syncdir" {
		t.Fatalf("Remove's last step is %q, not syncing the directory", ops.trace[len(ops.trace)-1])
	}
	if _, err := ReadFile(path); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("ReadFile after Remove = %v, want fs.ErrNotExist", err)
	}
	// Nothing to remove is no error.
	if err := Remove(path); err != nil {
		t.Fatal(err)
	}
}

// Remove dying at any step leaves either the file as it was, or nothing: never the previous
// copy alone, which a read would return in the file's place.
func TestRemoveCrashAtEveryStep(t *testing.T) {
	older, newer := lines("older", 2), lines("newer", 2)
	count := &faultOps{}
	path := filepath.Join(t.TempDir(), "state")
	twoWrites(t, path, older, newer)
	if err := remove(count, path); err != nil {
		t.Fatal(err)
	}
	for failAt := 1; failAt <= count.n; failAt++ {
		at := fmt.Sprintf("crash at step %d (%s)", failAt, count.trace[failAt-1])
		path := filepath.Join(t.TempDir(), "state")
		twoWrites(t, path, older, newer)
		remove(&faultOps{failAt: failAt, crash: true}, path)
		body, err := ReadFile(path)
		if !(err == nil && bytes.Equal(body, newer)) && !errors.Is(err, fs.ErrNotExist) {
			t.Fatalf("%s: ReadFile = %q, %v; want the file as it was, or none", at, body, err)
		}
	}
}
