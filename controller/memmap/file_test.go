package memmap

import (
	"bufio"
	"crypto/sha256"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/sim/vclock"
)

// sessionMap returns a map learned from n tunes of a seeded session, with one point of unknown
// time and temperature and one of unknown SWR and Q among them.
func sessionMap(t testing.TB, seed uint64, n int) *Map {
	t.Helper()
	s := newSession(seed, linearCap{})
	m := mustNew(t, Options{})
	for i := range n {
		pt, _ := s.tune(s.nextTune())
		switch i {
		case 1:
			pt.SWR, pt.Q = 0, 0
		case 2:
			pt.HasTemp, pt.Temp = false, 0
		}
		if err := m.Learn(pt); err != nil && !errors.Is(err, ErrSuperseded) {
			t.Fatal(err)
		}
	}
	mustLearn(t, m, Point{Freq: 14321 * physic.KiloHertz, Pos: 2345})
	return m
}

// samePredictions checks two maps predict the very same, bit for bit.
func samePredictions(t *testing.T, a, b *Map) {
	t.Helper()
	at := a.Drift().At.Add(3 * time.Hour)
	temp := celsius(21.5)
	for _, f := range spreadFreqs(20) {
		pa, oka := a.Predict(f, at, &temp)
		pb, okb := b.Predict(f, at, &temp)
		if pa != pb || oka != okb {
			t.Fatalf("at %v: %+v, %v against %+v, %v", f, pa, oka, pb, okb)
		}
	}
}

func TestSaveLoadRoundTrip(t *testing.T) {
	m := sessionMap(t, 21, 40)
	path := filepath.Join(t.TempDir(), "tune.map")
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	got, err := Load(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(got.Points(), m.Points()) {
		t.Fatalf("points differ:\n%+v\n%+v", got.Points(), m.Points())
	}
	if got.Drift() != m.Drift() {
		t.Fatalf("drift differs: %+v, %+v", got.Drift(), m.Drift())
	}
	samePredictions(t, got, m)
	// The encoding is canonical: a loaded map saves to the same bytes.
	if a, b := m.encode(), got.encode(); string(a) != string(b) {
		t.Fatalf("re-encoding differs:\n%s\n%s", a, b)
	}
	// Learning goes on alike after a reload.
	p := Point{Freq: 7123 * physic.KiloHertz, Pos: 11111, At: m.Drift().At.Add(time.Hour)}
	mustLearn(t, m, p)
	mustLearn(t, got, p)
	samePredictions(t, got, m)
}

func TestLoadFirstRunIsEmpty(t *testing.T) {
	m, err := Load(filepath.Join(t.TempDir(), "none.map"), Options{})
	if err != nil || m == nil || m.Len() != 0 {
		t.Fatalf("Load of nothing = %v, %v; want an empty map", m, err)
	}
}

// twoSaves saves a map, then the same map with one more point, so that the previous copy holds
// the first and the main file the second. It returns both maps' points and the main file.
func twoSaves(t *testing.T, path string) (older, newer []Point, data []byte) {
	t.Helper()
	m := sessionMap(t, 5, 1)
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	older = m.Points()
	mustLearn(t, m, Point{Freq: 10110 * physic.KiloHertz, Pos: 6000, At: m.Drift().At.Add(time.Minute)})
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return older, m.Points(), data
}

func expectFallback(t *testing.T, path string, want []Point, what string) {
	t.Helper()
	m, err := Load(path, Options{})
	if !errors.Is(err, ErrUsedPrevious) || m == nil {
		t.Fatalf("%s: Load = %v, %v; want the previous copy and ErrUsedPrevious", what, m, err)
	}
	if !slices.Equal(m.Points(), want) {
		t.Fatalf("%s: loaded %d points, not the previous copy's %d", what, m.Len(), len(want))
	}
}

func TestFlippedByteFallsBackToPrevious(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tune.map")
	older, _, data := twoSaves(t, path)
	for i := range data {
		for _, mask := range []byte{0x01, 0x20, 0x80} {
			if mask != 0x01 && i%5 != 0 {
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
	path := filepath.Join(t.TempDir(), "tune.map")
	older, _, data := twoSaves(t, path)
	for n := range len(data) {
		if err := os.WriteFile(path, data[:n], 0o600); err != nil {
			t.Fatal(err)
		}
		expectFallback(t, path, older, fmt.Sprintf("truncated to %d of %d bytes", n, len(data)))
	}
	if err := os.Remove(path); err != nil {
		t.Fatal(err)
	}
	expectFallback(t, path, older, "main file missing")
}

func TestLoadWithoutAnyGoodCopy(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tune.map")
	_, _, data := twoSaves(t, path)
	for _, p := range []string{path, path + PrevSuffix} {
		if err := os.WriteFile(p, data[:len(data)/2], 0o600); err != nil {
			t.Fatal(err)
		}
	}
	if m, err := Load(path, Options{}); m != nil || !errors.Is(err, ErrCorrupt) {
		t.Fatalf("Load of two torn copies = %v, %v; want nil and ErrCorrupt", m, err)
	}
	if err := os.Remove(path + PrevSuffix); err != nil {
		t.Fatal(err)
	}
	if m, err := Load(path, Options{}); m != nil || !errors.Is(err, ErrCorrupt) {
		t.Fatalf("Load of a torn copy alone = %v, %v; want nil and ErrCorrupt", m, err)
	}
}

func TestNewerVersionIsNotReplacedByPrevious(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tune.map")
	twoSaves(t, path)
	body := []byte("tankd-tunemap 2\nwhatever comes in version 2\n")
	data := fmt.Appendf(body, "sha256 %x\n", sha256Sum(body))
	if err := os.WriteFile(path, data, 0o600); err != nil {
		t.Fatal(err)
	}
	if m, err := Load(path, Options{}); m != nil || !errors.Is(err, ErrVersion) {
		t.Fatalf("Load of a version 2 file = %v, %v; want nil and ErrVersion", m, err)
	}
}

func TestSaveKeepsGoodPreviousOverCorruptMain(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tune.map")
	older, newer, data := twoSaves(t, path)
	if err := os.WriteFile(path, data[:10], 0o600); err != nil {
		t.Fatal(err)
	}
	m, err := Load(path, Options{})
	if !errors.Is(err, ErrUsedPrevious) {
		t.Fatal(err)
	}
	mustLearn(t, m, Point{Freq: 5350 * physic.KiloHertz, Pos: 20000, At: m.Drift().At.Add(time.Hour)})
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	prev, err := Load(path+PrevSuffix, Options{})
	if err != nil || !slices.Equal(prev.Points(), older) {
		t.Fatalf("previous copy after saving over a corrupt main file: %v (%d points, want %d)", err, prev.Len(), len(older))
	}
	_ = newer
}

// faultOps runs the real filesystem operations until the failAt-th, which fails; with crash,
// every later operation fails too, as if the process had died there (no clean-up runs).
// A failing Write first writes half its data, as a torn write would.
type faultOps struct {
	osOps
	failAt, n int
	crash     bool
	dead      bool
	noLink    bool
}

var errInjected = errors.New("injected failure")

func (f *faultOps) step() error {
	f.n++
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
	if err := f.ops.step(); err != nil {
		n, _ := f.tempFile.Write(b[:len(b)/2])
		return n, err
	}
	return f.tempFile.Write(b)
}

func (f faultFile) Sync() error {
	if err := f.ops.step(); err != nil {
		return err
	}
	return f.tempFile.Sync()
}

func (f faultFile) Close() error {
	if err := f.ops.step(); err != nil {
		f.tempFile.Close() // the descriptor goes with the process either way
		return err
	}
	return f.tempFile.Close()
}

func (f *faultOps) CreateTemp(dir, pattern string) (tempFile, error) {
	if err := f.step(); err != nil {
		return nil, err
	}
	t, err := f.osOps.CreateTemp(dir, pattern)
	if err != nil {
		return nil, err
	}
	return faultFile{t, f}, nil
}

func (f *faultOps) ReadFile(name string) ([]byte, error) {
	if err := f.step(); err != nil {
		return nil, err
	}
	return f.osOps.ReadFile(name)
}

func (f *faultOps) Remove(name string) error {
	if err := f.step(); err != nil {
		return err
	}
	return f.osOps.Remove(name)
}

func (f *faultOps) Link(o, n string) error {
	if err := f.step(); err != nil {
		return err
	}
	if f.noLink {
		return &fs.PathError{Op: "link", Path: n, Err: errors.ErrUnsupported}
	}
	return f.osOps.Link(o, n)
}

func (f *faultOps) Rename(o, n string) error {
	if err := f.step(); err != nil {
		return err
	}
	return f.osOps.Rename(o, n)
}

func (f *faultOps) SyncDir(dir string) error {
	if err := f.step(); err != nil {
		return err
	}
	return f.osOps.SyncDir(dir)
}

// A save that fails (or dies) at any one of its steps leaves a loadable map, the old one or the
// new one; the next save then succeeds and leaves no temporary files behind.
func TestSaveFailureAtEveryStep(t *testing.T) {
	for _, mode := range []struct {
		name          string
		crash, noLink bool
	}{{"error", false, false}, {"crash", true, false}, {"crash without hard links", true, true}} {
		t.Run(mode.name, func(t *testing.T) {
			// Count the steps of a save that does not fail.
			count := &faultOps{noLink: mode.noLink}
			path := filepath.Join(t.TempDir(), "tune.map")
			twoSaves(t, path)
			if err := sessionMap(t, 5, 1).save(count, path); err != nil {
				t.Fatal(err)
			}
			// Six at the least: read, unlink, link, create, write, sync, close, rename, sync.
			if count.n < 6 {
				t.Fatalf("a save took only %d steps", count.n)
			}
			for failAt := 1; failAt <= count.n; failAt++ {
				dir := t.TempDir()
				path := filepath.Join(dir, "tune.map")
				_, older, _ := twoSaves(t, path)
				m, err := Load(path, Options{})
				if err != nil {
					t.Fatal(err)
				}
				mustLearn(t, m, Point{Freq: 14100 * physic.KiloHertz, Pos: 3000, At: m.Drift().At.Add(time.Hour)})
				newer := m.Points()
				ops := &faultOps{failAt: failAt, crash: mode.crash, noLink: mode.noLink}
				saveErr := m.save(ops, path)

				got, err := Load(path, Options{})
				if err != nil {
					t.Fatalf("fault at step %d: Load = %v", failAt, err)
				}
				switch pts := got.Points(); {
				case slices.Equal(pts, newer):
				case slices.Equal(pts, older) && saveErr != nil:
				default:
					t.Fatalf("fault at step %d (save: %v): loaded %d points, neither old (%d) nor new (%d)",
						failAt, saveErr, len(pts), len(older), len(newer))
				}
				if err := m.Save(path); err != nil {
					t.Fatalf("fault at step %d: the next save failed: %v", failAt, err)
				}
				if got, err := Load(path, Options{}); err != nil || !slices.Equal(got.Points(), newer) {
					t.Fatalf("fault at step %d: after a clean save: %v", failAt, err)
				}
				ents, _ := os.ReadDir(dir)
				for _, e := range ents {
					if strings.Contains(e.Name(), tempInfix) {
						t.Fatalf("fault at step %d: %s left behind", failAt, e.Name())
					}
				}
				// A failed hard link is survived by copying; any other fault is reported.
				if saveErr != nil && !errors.Is(saveErr, errInjected) {
					t.Fatalf("fault at step %d: save error %v does not wrap the fault", failAt, saveErr)
				}
			}
		})
	}
}

// The crash test proper: a child process (this test binary, re-run) saves a growing map in a
// loop and says so after every save; the parent kills it with SIGKILL after some saves, mid-way
// through another, and the map on disk must hold at least every point the child reported saved.

const childEnv = "TANKD_MEMMAP_SAVE_CHILD"

// childSaves bounds the child's loop, so that it stops by itself if nobody kills it.
const childSaves = 400

func TestSaveSurvivesKill(t *testing.T) {
	if dir := os.Getenv(childEnv); dir != "" {
		saveForever(dir)
		return
	}
	dir := t.TempDir()
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe, "-test.run=^TestSaveSurvivesKill$")
	cmd.Env = append(os.Environ(), childEnv+"="+dir)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	const killAfter = 40
	sc := bufio.NewScanner(out)
	saved := 0
	for saved < killAfter && sc.Scan() {
		n, ok := strings.CutPrefix(sc.Text(), "saved ")
		if !ok {
			continue
		}
		if saved, err = strconv.Atoi(n); err != nil {
			t.Fatalf("child said %q", sc.Text())
		}
	}
	if err := cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	cmd.Wait()
	if saved < killAfter {
		t.Fatalf("the child reported only %d saves", saved)
	}
	m, err := Load(filepath.Join(dir, "tune.map"), Options{MaxPoints: childSaves + 1})
	if err != nil {
		t.Fatalf("Load after SIGKILL: %v", err)
	}
	if m.Len() < saved {
		t.Fatalf("after SIGKILL the map has %d points; the child had saved %d", m.Len(), saved)
	}
}

// saveForever is the child: learn a point, save, report, again.
func saveForever(dir string) {
	path := filepath.Join(dir, "tune.map")
	m, err := New(Options{MaxPoints: childSaves + 1})
	if err != nil {
		fmt.Println("error", err)
		return
	}
	for i := range childSaves {
		f := 3500*physic.KiloHertz + physic.Frequency(i)*25*physic.KiloHertz
		p := Point{Freq: f, Pos: int64(50000 - i*100), At: vclock.Epoch.Add(time.Duration(i) * time.Minute)}
		if err := m.Learn(p); err != nil {
			fmt.Println("error", err)
			return
		}
		if err := m.Save(path); err != nil {
			fmt.Println("error", err)
			return
		}
		fmt.Printf("saved %d\n", m.Len())
	}
}

func sha256Sum(b []byte) [32]byte { return sha256.Sum256(b) }
