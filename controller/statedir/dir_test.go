//go:build unix && !aix

package statedir

import (
	"bufio"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/tankd/tankd/controller/store"
)

func mustOpen(t *testing.T, dir string) *Dir {
	t.Helper()
	d, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.Close() })
	return d
}

func TestOpenCreatesDirectory(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "var", "tankd")
	d := mustOpen(t, dir)
	st, err := os.Stat(dir)
	if err != nil {
		t.Fatal(err)
	}
	// 0700: the daemon's state is its own (and systemd's StateDirectoryMode in systemd/tankd.service).
	if !st.IsDir() || st.Mode().Perm() != 0o700 {
		t.Fatalf("Open made %v, want a directory of mode 0700", st.Mode())
	}
	data, err := os.ReadFile(filepath.Join(dir, LockFile))
	if err != nil {
		t.Fatal(err)
	}
	if want := strconv.Itoa(os.Getpid()) + "\n"; string(data) != want {
		t.Fatalf("lock file holds %q, want this process's ID %q", data, want)
	}
	if err := d.Close(); err != nil {
		t.Fatal(err)
	}
	if err := d.Close(); err != nil {
		t.Fatalf("second Close = %v", err)
	}
}

func TestOpenExistingDirectoryKeepsItsFiles(t *testing.T) {
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, MapFile), []byte("map"), 0o600); err != nil {
		t.Fatal(err)
	}
	// A lock file a crashed holder left, naming a longer PID than any: it must be replaced whole.
	if err := os.WriteFile(filepath.Join(dir, LockFile), []byte("123456789012\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	mustOpen(t, dir)
	if data, err := os.ReadFile(filepath.Join(dir, MapFile)); err != nil || string(data) != "map" {
		t.Fatalf("map file after Open: %q, %v", data, err)
	}
	if data, err := os.ReadFile(filepath.Join(dir, LockFile)); err != nil || string(data) != strconv.Itoa(os.Getpid())+"\n" {
		t.Fatalf("lock file after Open: %q, %v; want this process's ID alone", data, err)
	}
}

func TestOpenMustExist(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "absent")
	d, err := Open(dir, Options{MustExist: true})
	if !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("Open of a missing directory with MustExist = %v, %v; want fs.ErrNotExist", d, err)
	}
	if _, err := os.Stat(dir); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("Open with MustExist made the directory: %v", err)
	}
	if err := os.Mkdir(dir, 0o700); err != nil {
		t.Fatal(err)
	}
	if d, err := Open(dir, Options{MustExist: true}); err != nil {
		t.Fatalf("Open of an existing directory with MustExist: %v", err)
	} else {
		d.Close()
	}
}

func TestOpenRefusesAFile(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "file")
	if err := os.WriteFile(dir, nil, 0o600); err != nil {
		t.Fatal(err)
	}
	for _, path := range []string{dir, ""} {
		if d, err := Open(path, Options{}); err == nil {
			d.Close()
			t.Fatalf("Open(%q) succeeded", path)
		}
	}
}

// lockedBy checks that err is Open's refusal naming the holder and the directory.
func lockedBy(t *testing.T, err error, dir, holder string) {
	t.Helper()
	if !errors.Is(err, ErrLocked) {
		t.Fatalf("Open of a held directory = %v, want ErrLocked", err)
	}
	if want := "state directory " + dir + " is in use by " + holder; !strings.Contains(err.Error(), want) {
		t.Fatalf("Open error %q does not say %q", err, want)
	}
}

func TestOpenTwiceInOneProcess(t *testing.T) {
	dir := t.TempDir()
	first := mustOpen(t, dir)
	second, err := Open(dir, Options{})
	if second != nil {
		second.Close()
	}
	lockedBy(t, err, dir, fmt.Sprintf("process %d", os.Getpid()))
	// The refused Open must not have disturbed the lock or the PID in its file.
	if _, err := Open(dir, Options{}); !errors.Is(err, ErrLocked) {
		t.Fatalf("third Open = %v, want ErrLocked", err)
	}
	if err := first.Close(); err != nil {
		t.Fatal(err)
	}
	mustOpen(t, dir)
}

// A holder that has locked the file but not yet written its PID is still named, as best it can be.
func TestOpenHeldWithoutAPID(t *testing.T) {
	dir := t.TempDir()
	mustOpen(t, dir)
	if err := os.Truncate(filepath.Join(dir, LockFile), 0); err != nil {
		t.Fatal(err)
	}
	_, err := Open(dir, Options{})
	lockedBy(t, err, dir, "another process")
}

const holdEnv = "TANKD_STATEDIR_HOLD"

// Another process holds the directory: Open names it; once it is killed, the kernel has
// released its lock and Open succeeds.
func TestOpenHeldByAnotherProcess(t *testing.T) {
	if dir := os.Getenv(holdEnv); dir != "" {
		holdUntilStdinCloses(dir)
		return
	}
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cmd := exec.Command(exe, "-test.run=^TestOpenHeldByAnotherProcess$")
	cmd.Env = append(os.Environ(), holdEnv+"="+dir)
	cmd.Stderr = os.Stderr
	stdin, err := cmd.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	defer stdin.Close()
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer cmd.Wait()
	defer cmd.Process.Kill()
	sc := bufio.NewScanner(out)
	if !sc.Scan() || sc.Text() != "holding" {
		t.Fatalf("the child said %q, %v; want holding", sc.Text(), sc.Err())
	}
	_, err = Open(dir, Options{})
	lockedBy(t, err, dir, fmt.Sprintf("process %d", cmd.Process.Pid))

	if err := cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	cmd.Wait() // after this, the child's descriptors are closed and its lock gone
	d := mustOpen(t, dir)
	if data, err := os.ReadFile(d.LockPath()); err != nil || string(data) != strconv.Itoa(os.Getpid())+"\n" {
		t.Fatalf("lock file after taking over from a killed holder: %q, %v", data, err)
	}
}

// holdUntilStdinCloses is the child: hold the directory until the parent closes stdin or
// kills it.
func holdUntilStdinCloses(dir string) {
	d, err := Open(dir, Options{})
	if err != nil {
		fmt.Println("error", err)
		return
	}
	defer d.Close()
	fmt.Println("holding")
	bufio.NewReader(os.Stdin).ReadString(0)
}

func TestPaths(t *testing.T) {
	dir := t.TempDir()
	d := mustOpen(t, dir)
	// The names the daemon has always used (cmd/tankd) must not move under existing files.
	for _, tc := range []struct{ got, want string }{
		{d.Path(), dir},
		{d.MapPath(), filepath.Join(dir, "loop.map")},
		{d.CalibrationPath(), filepath.Join(dir, "backlash")},
		{d.MarkerPath(), filepath.Join(dir, MarkerFile)},
		{d.LockPath(), filepath.Join(dir, LockFile)},
	} {
		if tc.got != tc.want {
			t.Errorf("path %q, want %q", tc.got, tc.want)
		}
	}
}

func takeNone(t *testing.T, d *Dir, what string) {
	t.Helper()
	m, ok, err := d.TakeMarker()
	if ok || err != nil || !sameMarker(m, Marker{}) {
		t.Fatalf("%s: TakeMarker = %+v, %v, %v; want no marker", what, m, ok, err)
	}
}

// noMarkerFiles checks that neither the marker nor its previous copy is left.
func noMarkerFiles(t *testing.T, d *Dir, what string) {
	t.Helper()
	for _, p := range []string{d.MarkerPath(), d.MarkerPath() + store.PrevSuffix} {
		if _, err := os.Lstat(p); !errors.Is(err, fs.ErrNotExist) {
			t.Fatalf("%s: %s is still there (%v)", what, filepath.Base(p), err)
		}
	}
}

func TestMarkerCycle(t *testing.T) {
	d := mustOpen(t, t.TempDir())
	takeNone(t, d, "first run")

	m := Marker{Position: -1234, Trusted: true, At: stopAt, Reason: "SIGTERM"}
	if err := d.WriteMarker(m); err != nil {
		t.Fatal(err)
	}
	got, ok, err := d.TakeMarker()
	if !ok || err != nil || !sameMarker(got, m) {
		t.Fatalf("TakeMarker = %+v, %v, %v; want %+v", got, ok, err, m)
	}
	noMarkerFiles(t, d, "after TakeMarker")
	// A crash in this run leaves no marker: the next start must not see a clean stop.
	takeNone(t, d, "after a crash")

	// Two clean stops in a row, the marker never taken between them: the later one counts.
	later := Marker{Position: 55, At: stopAt.Add(1e9)}
	for _, w := range []Marker{m, later} {
		if err := d.WriteMarker(w); err != nil {
			t.Fatal(err)
		}
	}
	if got, ok, err := d.TakeMarker(); !ok || err != nil || !sameMarker(got, later) {
		t.Fatalf("TakeMarker = %+v, %v, %v; want %+v", got, ok, err, later)
	}
	noMarkerFiles(t, d, "after two writes and TakeMarker")
}

// A marker that cannot be used counts as a crash, says why, and is gone afterwards.
func TestUnusableMarker(t *testing.T) {
	good, err := encodeMarker(Marker{Position: 1, Trusted: true, At: stopAt})
	if err != nil {
		t.Fatal(err)
	}
	framed := store.AppendChecksum(good)
	for _, tc := range []struct {
		name  string
		plant func(d *Dir) error
		want  error
	}{
		{"torn", func(d *Dir) error {
			return os.WriteFile(d.MarkerPath(), framed[:len(framed)/2], 0o600)
		}, store.ErrCorrupt},
		{"not a marker", func(d *Dir) error {
			return store.WriteFile(d.MarkerPath(), []byte("tankd-calibration 1\n"))
		}, ErrMarkerFormat},
		{"a newer version", func(d *Dir) error {
			return store.WriteFile(d.MarkerPath(), []byte("tankd-clean-stop 2\nposition=1\n"))
		}, ErrMarkerVersion},
		// A good previous copy is of an earlier stop than the damaged marker: the motor has
		// moved since.
		{"only the previous copy good", func(d *Dir) error {
			if err := d.WriteMarker(Marker{Position: 1, At: stopAt}); err != nil {
				return err
			}
			if err := d.WriteMarker(Marker{Position: 2, At: stopAt}); err != nil {
				return err
			}
			return os.WriteFile(d.MarkerPath(), []byte("torn"), 0o600)
		}, store.ErrUsedPrevious},
		{"unreadable", func(d *Dir) error { return os.Mkdir(d.MarkerPath(), 0o700) }, nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			d := mustOpen(t, t.TempDir())
			if err := tc.plant(d); err != nil {
				t.Fatal(err)
			}
			m, ok, err := d.TakeMarker()
			if ok || err == nil || !sameMarker(m, Marker{}) {
				t.Fatalf("TakeMarker = %+v, %v, %v; want no marker and an error", m, ok, err)
			}
			if tc.want != nil && !errors.Is(err, tc.want) {
				t.Fatalf("TakeMarker error %v does not wrap %v", err, tc.want)
			}
			noMarkerFiles(t, d, "after an unusable marker")
			takeNone(t, d, "the start after")
		})
	}
}

func TestMarkerAfterClose(t *testing.T) {
	d := mustOpen(t, t.TempDir())
	if err := d.Close(); err != nil {
		t.Fatal(err)
	}
	if err := d.WriteMarker(Marker{At: stopAt}); !errors.Is(err, os.ErrClosed) {
		t.Fatalf("WriteMarker after Close = %v, want os.ErrClosed", err)
	}
	if _, ok, err := d.TakeMarker(); ok || !errors.Is(err, os.ErrClosed) {
		t.Fatalf("TakeMarker after Close = %v, %v; want os.ErrClosed", ok, err)
	}
	if _, err := os.Lstat(d.MarkerPath()); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("WriteMarker after Close left a marker: %v", err)
	}
}

func TestWriteMarkerRefusesBadMarker(t *testing.T) {
	d := mustOpen(t, t.TempDir())
	if err := d.WriteMarker(Marker{At: stopAt, Reason: strings.Repeat("x", MaxReasonLen+1)}); err == nil {
		t.Fatal("WriteMarker with an over-long reason succeeded")
	}
	takeNone(t, d, "after a refused marker")
}
