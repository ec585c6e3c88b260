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
	"syscall"
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

// copyKind is what lies at one copy's path in TestDecodeOutcomes.
type copyKind int

const (
	missing    copyKind = iota
	good                // verifies and parses
	torn                // fails its checksum
	rejected            // verifies, but the parser finds it corrupt
	unreadable          // a directory: opening works, reading fails
	newer               // verifies, but is of a format the parser does not know
)

var kindNames = [...]string{"missing", "good", "torn", "rejected", "unreadable", "newer"}

func (k copyKind) String() string { return kindNames[k] }

// outcome is how a caller must take Decode's result; see "What the caller must do" in doc.go.
type outcome int

const (
	outUseMain    outcome = iota // nil error
	outUsePrev                   // ErrUsedPrevious, with the previous copy's data
	outFirstRun                  // fs.ErrNotExist
	outSetAside                  // ErrCorrupt
	outLeaveAlone                // errNewer or an I/O error, and none of the above
)

var outcomeNames = [...]string{"use the main copy", "use the previous copy", "first run", "set aside", "leave alone"}

func (o outcome) String() string { return outcomeNames[o] }

func plant(t *testing.T, name string, k copyKind, body []byte) {
	t.Helper()
	var err error
	switch k {
	case good:
		err = os.WriteFile(name, AppendChecksum(slices.Clone(body)), 0o600)
	case torn:
		err = os.WriteFile(name, AppendChecksum(slices.Clone(body))[:len(body)/2], 0o600)
	case rejected:
		err = os.WriteFile(name, AppendChecksum([]byte("bad\n")), 0o600)
	case unreadable:
		err = os.Mkdir(name, 0o700)
	case newer:
		err = os.WriteFile(name, AppendChecksum([]byte("v2\nok\n")), 0o600)
	}
	if err != nil {
		t.Fatal(err)
	}
}

// Every pairing of a main and a previous copy, and how Decode's error tells the caller what to
// do: ErrCorrupt only when every copy there is damaged, so that nothing the caller could still
// use, or must not pass over, is set aside.
func TestDecodeOutcomes(t *testing.T) {
	prevKinds := []copyKind{missing, good, torn, rejected, unreadable, newer}
	want := map[copyKind][]outcome{ // by main copy, then by previous copy in prevKinds' order
		missing:    {outFirstRun, outUsePrev, outSetAside, outSetAside, outLeaveAlone, outLeaveAlone},
		good:       {outUseMain, outUseMain, outUseMain, outUseMain, outUseMain, outUseMain},
		torn:       {outSetAside, outUsePrev, outSetAside, outSetAside, outLeaveAlone, outLeaveAlone},
		rejected:   {outSetAside, outUsePrev, outSetAside, outSetAside, outLeaveAlone, outLeaveAlone},
		unreadable: {outLeaveAlone, outUsePrev, outLeaveAlone, outLeaveAlone, outLeaveAlone, outLeaveAlone},
		newer:      {outLeaveAlone, outLeaveAlone, outLeaveAlone, outLeaveAlone, outLeaveAlone, outLeaveAlone},
	}
	mainBody, prevBody := lines("ok", 3), lines("ok", 2)
	for mk, row := range want {
		for i, pk := range prevKinds {
			t.Run(fmt.Sprintf("main %v, previous %v", mk, pk), func(t *testing.T) {
				path := filepath.Join(t.TempDir(), "state")
				plant(t, path, mk, mainBody)
				plant(t, path+PrevSuffix, pk, prevBody)
				calls := 0
				got, err := Decode(path, parseTagged("ok", &calls))
				is := func(target error) bool { return errors.Is(err, target) }
				var ok bool
				switch row[i] {
				case outUseMain:
					ok = err == nil && got == string(mainBody)
				case outUsePrev:
					ok = is(ErrUsedPrevious) && got == string(prevBody) && !is(ErrCorrupt) && !is(fs.ErrNotExist)
				case outFirstRun:
					ok = is(fs.ErrNotExist) && got == "" && !is(ErrCorrupt)
				case outSetAside:
					ok = is(ErrCorrupt) && got == "" && !is(fs.ErrNotExist) && !is(errNewer)
				case outLeaveAlone:
					ok = err != nil && got == "" && !is(ErrCorrupt) && !is(fs.ErrNotExist) && !is(ErrUsedPrevious)
					// Whatever stopped the read is what the error names.
					if mk == newer || pk == newer {
						ok = ok && is(errNewer)
					}
					if mk == unreadable || pk == unreadable && mk != newer {
						ok = ok && is(syscall.EISDIR)
					}
				}
				if !ok {
					t.Fatalf("Decode = %q, %v; want %q", got, err, row[i])
				}
				// Both copies' troubles are said, whichever is wrapped.
				if err != nil && !is(ErrUsedPrevious) && mk != newer && pk != missing && !strings.Contains(err.Error(), "previous copy") {
					t.Fatalf("Decode error %q does not say what was wrong with the previous copy", err)
				}
			})
		}
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

// WriteNew puts the data at the path as it is (no checksum line), replaces what was there, and
// leaves no temporary file by its pattern behind.
func TestWriteNewWritesTheDataAsItIs(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "a.rec")
	for _, data := range [][]byte{[]byte("first\n"), []byte("second, no newline")} {
		if err := WriteNew(path, ".a.rec.tmp-*", data); err != nil {
			t.Fatal(err)
		}
		got, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		if string(got) != string(data) {
			t.Fatalf("read back %q, want %q", got, data)
		}
	}
	left, err := filepath.Glob(filepath.Join(dir, ".a.rec.tmp-*"))
	if err != nil || len(left) != 0 {
		t.Fatalf("temporary files left: %v (%v)", left, err)
	}
	if err := WriteNew(filepath.Join(dir, "missing", "b"), "b.tmp-*", []byte("x")); err == nil || errors.Is(err, ErrDirSync) {
		t.Fatalf("a write into a missing directory: %v, want a failure to create the file", err)
	}
}
