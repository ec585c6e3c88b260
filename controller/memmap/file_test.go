package memmap

import (
	"bytes"
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/store"
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

// A map file of version 1 (written before the map kept the evidence of its errors), kept in
// testdata, still loads, with no evidence: the options' guesses. Saved again, it is version 2:
// the same lines, with an empty calib line after the drift line.
func TestLoadVersion1File(t *testing.T) {
	const golden = "testdata/version1.map"
	old, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	m, err := Load(golden, Options{})
	if err != nil {
		t.Fatal(err)
	}
	// Its points line says 4, its drift line at=2026-01-01T00:32:00Z.
	if at := time.Date(2026, 1, 1, 0, 32, 0, 0, time.UTC); m.Len() != 4 || !m.Drift().At.Equal(at) {
		t.Fatalf("loaded %d points, drift at %v; want 4 points, drift at %v", m.Len(), m.Drift().At, at)
	}
	if m.cal != (calib{}) {
		t.Fatalf("a version 1 map has evidence %+v", m.cal)
	}
	body, err := store.Verify(old)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.SplitAfter(string(body), "\n")
	lines[0] = "tankd-tunemap 2\n"
	lines = slices.Insert(lines, 2, "calib shape=0,0 eps=0,0 off=0,0 noise=0,0 prior=0,0\n")
	want := store.AppendChecksum([]byte(strings.Join(lines, "")))
	if got := m.encode(); !bytes.Equal(got, want) {
		t.Fatalf("saved again:\n%s\nwant:\n%s", got, want)
	}
}

// A map file of version 2, kept in testdata, loads with its evidence and saves back to the very
// same bytes: the format has not changed.
func TestLoadVersion2File(t *testing.T) {
	const golden = "testdata/version2.map"
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	m, err := Load(golden, Options{})
	if err != nil {
		t.Fatal(err)
	}
	// It is the version 1 map after four more tunes, the last at 02:00.
	if at := time.Date(2026, 1, 1, 2, 0, 0, 0, time.UTC); m.Len() != 8 || !m.Drift().At.Equal(at) {
		t.Fatalf("loaded %d points, drift at %v; want 8 points, drift at %v", m.Len(), m.Drift().At, at)
	}
	if m.cal.w[cShape] == 0 || m.cal.w[cNoise] == 0 {
		t.Fatalf("the evidence did not load: %+v", m.cal)
	}
	path := filepath.Join(t.TempDir(), "tune.map")
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	got, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Fatalf("saved again, the file differs:\n%s\nwant:\n%s", got, want)
	}
}

func TestSaveKeepsPreviousMap(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tune.map")
	older, _, _ := twoSaves(t, path)
	prev, err := Load(path+PrevSuffix, Options{})
	if err != nil || !slices.Equal(prev.Points(), older) {
		t.Fatalf("previous copy: %v (%d points, want %d)", err, prev.Len(), len(older))
	}
}

func TestLoadFallsBackToPrevious(t *testing.T) {
	// A body whose checksum is good but which is not a map: only the parser can tell.
	unparsable := store.AppendChecksum([]byte("tankd-tunemap 1\nnot a drift line\npoints 0\n"))
	for _, tc := range []struct {
		name string
		bad  func(data []byte) []byte // nil: no main file
	}{
		{"flipped byte", func(d []byte) []byte { d = slices.Clone(d); d[len(d)/3] ^= 0x04; return d }},
		{"truncated", func(d []byte) []byte { return d[:len(d)/2] }},
		{"missing", nil},
		{"good checksum, bad content", func([]byte) []byte { return unparsable }},
		{"good checksum, no signature", func([]byte) []byte { return store.AppendChecksum([]byte("tune map\n")) }},
	} {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "tune.map")
			older, _, data := twoSaves(t, path)
			if err := os.Remove(path); err != nil {
				t.Fatal(err)
			}
			if tc.bad != nil {
				if err := os.WriteFile(path, tc.bad(data), 0o600); err != nil {
					t.Fatal(err)
				}
			}
			m, err := Load(path, Options{})
			if !errors.Is(err, ErrUsedPrevious) || !errors.Is(err, store.ErrUsedPrevious) || m == nil {
				t.Fatalf("Load = %v, %v; want the previous copy and ErrUsedPrevious", m, err)
			}
			if errors.Is(err, ErrCorrupt) {
				t.Fatalf("Load returned a usable map with an error matching ErrCorrupt: %v", err)
			}
			if !slices.Equal(m.Points(), older) {
				t.Fatalf("loaded %d points, not the previous copy's %d", m.Len(), len(older))
			}
		})
	}
}

func TestLoadWithoutAnyGoodCopy(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tune.map")
	_, _, data := twoSaves(t, path)
	torn := data[:len(data)/2]
	for _, p := range []string{path, path + PrevSuffix} {
		if err := os.WriteFile(p, torn, 0o600); err != nil {
			t.Fatal(err)
		}
	}
	expectCorrupt := func(what string) {
		t.Helper()
		m, err := Load(path, Options{})
		if m != nil || !errors.Is(err, ErrCorrupt) || !errors.Is(err, store.ErrCorrupt) {
			t.Fatalf("Load of %s = %v, %v; want nil and ErrCorrupt", what, m, err)
		}
	}
	expectCorrupt("two torn copies")
	if err := os.Remove(path + PrevSuffix); err != nil {
		t.Fatal(err)
	}
	expectCorrupt("a torn copy alone")
	// A missing main file beside a torn previous copy is no first run: no empty map.
	if err := os.Rename(path, path+PrevSuffix); err != nil {
		t.Fatal(err)
	}
	expectCorrupt("a torn previous copy alone")
}

func TestNewerVersionIsNotReplacedByPrevious(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tune.map")
	twoSaves(t, path)
	data := store.AppendChecksum([]byte("tankd-tunemap 3\nwhatever comes in version 3\n"))
	if err := os.WriteFile(path, data, 0o600); err != nil {
		t.Fatal(err)
	}
	m, err := Load(path, Options{})
	if m != nil || !errors.Is(err, ErrVersion) {
		t.Fatalf("Load of a version 3 file = %v, %v; want nil and ErrVersion", m, err)
	}
	if errors.Is(err, ErrUsedPrevious) || errors.Is(err, ErrCorrupt) {
		t.Fatalf("Load of a version 3 file: %v; want ErrVersion alone", err)
	}
}

func TestSaveReportsFailure(t *testing.T) {
	path := filepath.Join(t.TempDir(), "no such directory", "tune.map")
	err := sessionMap(t, 5, 1).Save(path)
	if !errors.Is(err, fs.ErrNotExist) || !strings.HasPrefix(err.Error(), "memmap: save: ") {
		t.Fatalf("Save into a missing directory = %v; want a memmap error wrapping fs.ErrNotExist", err)
	}
}
