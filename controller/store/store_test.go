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
)

// lines returns a body of n numbered lines, each padded to a few dozen bytes.
func lines(tag string, n int) []byte {
	var b []byte
	for i := range n {
		b = fmt.Appendf(b, "%s entry %04d %s\n", tag, i, strings.Repeat("x", i%23))
	}
	return b
}

func mustWrite(t testing.TB, path string, body []byte) {
	t.Helper()
	if err := WriteFile(path, body); err != nil {
		t.Fatal(err)
	}
}

// twoWrites writes older and then newer to path, so that the previous copy holds older and the
// main file newer, and returns the main file's bytes.
func twoWrites(t *testing.T, path string, older, newer []byte) []byte {
	t.Helper()
	mustWrite(t, path, older)
	mustWrite(t, path, newer)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return data
}

func TestWriteReadRoundTrip(t *testing.T) {
	dir := t.TempDir()
	for _, body := range [][]byte{nil, []byte("\n"), []byte("one\n"), lines("big", 3000)} {
		path := filepath.Join(dir, "state")
		mustWrite(t, path, body)
		got, err := ReadFile(path)
		if err != nil || !bytes.Equal(got, body) {
			t.Fatalf("ReadFile after writing %d bytes = %d bytes, %v", len(body), len(got), err)
		}
		data, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		if want := AppendChecksum(bytes.Clone(body)); !bytes.Equal(data, want) {
			t.Fatalf("file holds %q, want the body and its checksum line", data)
		}
	}
}

func TestWriteKeepsPrevious(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	older, newer := lines("old", 3), lines("new", 4)
	twoWrites(t, path, older, newer)
	prev, err := os.ReadFile(path + PrevSuffix)
	if err != nil {
		t.Fatal(err)
	}
	if body, err := Verify(prev); err != nil || !bytes.Equal(body, older) {
		t.Fatalf("previous copy = %q, %v; want the older body", body, err)
	}
}

func TestFilesAreCreatedPrivate(t *testing.T) {
	for _, noLink := range []bool{false, true} {
		path := filepath.Join(t.TempDir(), "state")
		ops := &faultOps{noLink: noLink}
		for _, body := range [][]byte{lines("a", 1), lines("b", 2)} {
			if err := write(ops, path, body); err != nil {
				t.Fatal(err)
			}
		}
		for _, p := range []string{path, path + PrevSuffix} {
			st, err := os.Stat(p)
			if err != nil {
				t.Fatal(err)
			}
			// 0600: owner read and write only, as the API promises.
			if m := st.Mode().Perm(); m != 0o600 {
				t.Errorf("without hard links %v: %s has mode %v, want 0600", noLink, filepath.Base(p), m)
			}
		}
	}
}

func TestWriteRefusesBadBodies(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	big := make([]byte, MaxBodySize+1)
	big[len(big)-1] = '\n'
	for _, body := range [][]byte{[]byte("no newline"), big} {
		if err := WriteFile(path, body); err == nil {
			t.Errorf("WriteFile of %d bytes ending in %q succeeded", len(body), body[len(body)-1])
		}
		if _, err := os.Stat(path); !errors.Is(err, fs.ErrNotExist) {
			t.Errorf("a refused body left a file: %v", err)
		}
	}
}

// WriteFile appends the checksum to a copy: a body cut from a larger buffer must not have the
// bytes after it overwritten.
func TestWriteLeavesCallersBufferAlone(t *testing.T) {
	buf := []byte("line\nrest of the buffer")
	orig := string(buf)
	mustWrite(t, filepath.Join(t.TempDir(), "state"), buf[:5])
	if string(buf) != orig {
		t.Fatalf("buffer became %q", buf)
	}
}

func TestReadFirstRun(t *testing.T) {
	body, err := ReadFile(filepath.Join(t.TempDir(), "none"))
	if body != nil || !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("ReadFile of nothing = %q, %v; want fs.ErrNotExist", body, err)
	}
}

func expectFallback(t *testing.T, path string, want []byte, what string) {
	t.Helper()
	body, err := ReadFile(path)
	if !errors.Is(err, ErrUsedPrevious) || !bytes.Equal(body, want) {
		t.Fatalf("%s: ReadFile = %d bytes, %v; want the previous copy's %d and ErrUsedPrevious",
			what, len(body), err, len(want))
	}
	// The data is usable: the error must not look like a failure or a first run.
	if errors.Is(err, ErrCorrupt) || errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("%s: fallback error %v also matches ErrCorrupt or fs.ErrNotExist", what, err)
	}
}

func TestFlippedBitFallsBackToPrevious(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	older := lines("old", 5)
	data := twoWrites(t, path, older, lines("new", 6))
	for i := range data {
		for _, mask := range []byte{0x01, 0x02, 0x04, 0x08, 0x10, 0x20, 0x40, 0x80} {
			if mask != 0x01 && i%7 != 0 {
				continue // a lighter sample of the other bits keeps the test quick
			}
			bad := slices.Clone(data)
			bad[i] ^= mask
			if err := os.WriteFile(path, bad, 0o600); err != nil {
				t.Fatal(err)
			}
			expectFallback(t, path, older, fmt.Sprintf("byte %d ^ %#x", i, mask))
		}
	}
}

func TestTruncationFallsBackToPrevious(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	older := lines("old", 5)
	data := twoWrites(t, path, older, lines("new", 6))
	for n := range len(data) {
		if err := os.WriteFile(path, data[:n], 0o600); err != nil {
			t.Fatal(err)
		}
		expectFallback(t, path, older, fmt.Sprintf("truncated to %d of %d bytes", n, len(data)))
	}
	for _, tail := range []string{"\n", "x", "more\n", "sha256 " + sumEmpty + "\n"} {
		if err := os.WriteFile(path, append(slices.Clone(data), tail...), 0o600); err != nil {
			t.Fatal(err)
		}
		expectFallback(t, path, older, fmt.Sprintf("extended by %q", tail))
	}
	if err := os.Remove(path); err != nil {
		t.Fatal(err)
	}
	expectFallback(t, path, older, "main file missing")
}

func TestOversizedMainFallsBack(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	older := lines("old", 2)
	twoWrites(t, path, older, lines("new", 2))
	if err := os.WriteFile(path, make([]byte, MaxBodySize+sumLineLen+1), 0o600); err != nil {
		t.Fatal(err)
	}
	expectFallback(t, path, older, "main file too large")
}

func TestUnreadableMainFallsBack(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	older := lines("old", 2)
	twoWrites(t, path, older, lines("new", 2))
	// A directory in its place: opening works, reading fails, whoever the test runs as.
	if err := os.Remove(path); err != nil {
		t.Fatal(err)
	}
	if err := os.Mkdir(path, 0o700); err != nil {
		t.Fatal(err)
	}
	expectFallback(t, path, older, "main file unreadable")
}

// With no good copy, ReadFile says why for both, and matches fs.ErrNotExist only when neither
// copy exists.
func TestReadWithoutAnyGoodCopy(t *testing.T) {
	good := AppendChecksum(lines("good", 3))
	torn := good[:len(good)/2]
	for _, tc := range []struct {
		name       string
		main, prev []byte // nil: no such file
		corrupt    bool
		notExist   bool
	}{
		{"both torn", torn, torn, true, false},
		{"main torn, no previous", torn, nil, true, false},
		{"main missing, previous torn", nil, torn, true, false},
		{"neither", nil, nil, false, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "state")
			for p, data := range map[string][]byte{path: tc.main, path + PrevSuffix: tc.prev} {
				if data != nil {
					if err := os.WriteFile(p, data, 0o600); err != nil {
						t.Fatal(err)
					}
				}
			}
			body, err := ReadFile(path)
			if body != nil || err == nil {
				t.Fatalf("ReadFile = %q, %v; want an error", body, err)
			}
			if errors.Is(err, ErrCorrupt) != tc.corrupt || errors.Is(err, fs.ErrNotExist) != tc.notExist {
				t.Fatalf("ReadFile error %v: ErrCorrupt %v (want %v), fs.ErrNotExist %v (want %v)", err,
					errors.Is(err, ErrCorrupt), tc.corrupt, errors.Is(err, fs.ErrNotExist), tc.notExist)
			}
			if errors.Is(err, ErrUsedPrevious) {
				t.Fatalf("ReadFile error %v matches ErrUsedPrevious", err)
			}
		})
	}
}

var errNewer = errors.New("newer format")

// parseTagged accepts bodies whose every line starts with tag; a first line "v2" is a format it
// does not know, and anything else is corrupt.
func parseTagged(tag string, calls *int) func([]byte) (string, error) {
	return func(body []byte) (string, error) {
		*calls++
		if bytes.HasPrefix(body, []byte("v2\n")) {
			return "", errNewer
		}
		for l := range strings.Lines(string(body)) {
			if !strings.HasPrefix(l, tag) {
				return "", fmt.Errorf("%w: line %q", ErrCorrupt, l)
			}
		}
		return string(body), nil
	}
}

func TestDecode(t *testing.T) {
	older := lines("ok", 2)
	for _, tc := range []struct {
		name      string
		main      []byte // written raw, checksum line included
		want      string
		wantErr   []error
		wantCalls int
	}{
		{"good", AppendChecksum(lines("ok", 3)), string(lines("ok", 3)), nil, 1},
		{"content rejected", AppendChecksum(lines("bad", 3)), string(older), []error{ErrUsedPrevious}, 2},
		{"checksum fails", AppendChecksum(lines("ok", 3))[:20], string(older), []error{ErrUsedPrevious}, 1},
		{"newer format", AppendChecksum([]byte("v2\nok\n")), "", []error{errNewer}, 1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "state")
			mustWrite(t, path, older)
			mustWrite(t, path, older)
			if err := os.WriteFile(path, tc.main, 0o600); err != nil {
				t.Fatal(err)
			}
			calls := 0
			got, err := Decode(path, parseTagged("ok", &calls))
			if got != tc.want || calls != tc.wantCalls {
				t.Fatalf("Decode = %q after %d parses, want %q after %d", got, calls, tc.want, tc.wantCalls)
			}
			for _, e := range tc.wantErr {
				if !errors.Is(err, e) {
					t.Fatalf("Decode error %v does not match %v", err, e)
				}
			}
			if tc.wantErr == nil && err != nil {
				t.Fatal(err)
			}
			if errors.Is(err, errNewer) && errors.Is(err, ErrUsedPrevious) {
				t.Fatalf("a newer main copy was passed over: %v", err)
			}
		})
	}
}

// A previous copy of a newer format is reported as such when the main copy is corrupt.
func TestDecodeReportsBothReasons(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	if err := os.WriteFile(path+PrevSuffix, AppendChecksum([]byte("v2\n")), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, []byte("torn"), 0o600); err != nil {
		t.Fatal(err)
	}
	calls := 0
	_, err := Decode(path, parseTagged("ok", &calls))
	if !errors.Is(err, ErrCorrupt) || !errors.Is(err, errNewer) {
		t.Fatalf("Decode error %v: want both the main copy's ErrCorrupt and the previous copy's reason", err)
	}
}

// A corrupt main file must not displace the good previous copy, and the write after it makes
// a good main file again.
func TestWriteOverCorruptMainKeepsGoodPrevious(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state")
	older := lines("old", 3)
	data := twoWrites(t, path, older, lines("new", 3))
	if err := os.WriteFile(path, data[:10], 0o600); err != nil {
		t.Fatal(err)
	}
	newest := lines("newest", 3)
	mustWrite(t, path, newest)
	if got, err := ReadFile(path); err != nil || !bytes.Equal(got, newest) {
		t.Fatalf("ReadFile = %q, %v", got, err)
	}
	prev, err := os.ReadFile(path + PrevSuffix)
	if err != nil {
		t.Fatal(err)
	}
	if body, err := Verify(prev); err != nil || !bytes.Equal(body, older) {
		t.Fatalf("previous copy after writing over a corrupt main file = %q, %v; want the older body", body, err)
	}
}

func TestWriteRemovesStaleTemps(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "state")
	stale := []string{"state.tmp-123", "state.prev.tmp-9"}
	others := []string{"other.tmp-1", "state.tmpfile", "statex.tmp-2", "state.prevx"}
	for _, n := range slices.Concat(stale, others) {
		if err := os.WriteFile(filepath.Join(dir, n), []byte("junk"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	mustWrite(t, path, lines("a", 1))
	for _, n := range stale {
		if _, err := os.Stat(filepath.Join(dir, n)); !errors.Is(err, fs.ErrNotExist) {
			t.Errorf("stale %s: %v; want it removed", n, err)
		}
	}
	for _, n := range others {
		if _, err := os.Stat(filepath.Join(dir, n)); err != nil {
			t.Errorf("unrelated %s: %v; want it left alone", n, err)
		}
	}
}

// A bare file name is relative to the working directory, as os functions take it.
func TestWriteBareName(t *testing.T) {
	t.Chdir(t.TempDir())
	body := lines("here", 2)
	mustWrite(t, "state", body)
	mustWrite(t, "state", body)
	for _, p := range []string{"state", "state" + PrevSuffix} {
		if _, err := os.Stat(p); err != nil {
			t.Fatal(err)
		}
	}
	if got, err := ReadFile("state"); err != nil || !bytes.Equal(got, body) {
		t.Fatalf("ReadFile = %q, %v", got, err)
	}
}

func BenchmarkWriteFile(b *testing.B) {
	path := filepath.Join(b.TempDir(), "state")
	body := lines("bench", 1000)
	b.SetBytes(int64(len(body)))
	for b.Loop() {
		mustWrite(b, path, body)
	}
}

func BenchmarkReadFile(b *testing.B) {
	path := filepath.Join(b.TempDir(), "state")
	body := lines("bench", 1000)
	mustWrite(b, path, body)
	b.SetBytes(int64(len(body)))
	for b.Loop() {
		if _, err := ReadFile(path); err != nil {
			b.Fatal(err)
		}
	}
}
