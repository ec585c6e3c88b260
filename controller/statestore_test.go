package controller_test

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/store"
	"github.com/tankd/tankd/controller/tune"
)

// Each file is written only when what it holds changed: the map when an operation taught it
// something (and not again on the way out if nothing changed since), the calibration when the
// measured play differs, the position hint when the motor moved.
func TestStateWritesOnlyWhatChanged(t *testing.T) {
	dir := openDir(t, t.TempDir())
	st := loadState(t, dir)
	r := newRig(t, rigOptions{svc: controller.Options{State: st}})
	stop := r.Start(t)
	want := controller.StateWrites{}
	check := func(what string) {
		t.Helper()
		if got := st.Writes(); got != want {
			t.Fatalf("after %s: %+v writes, want %+v", what, got, want)
		}
	}
	check("loading")
	r.Loop.Radio.SetFrequency(f80)
	steps := []struct {
		what   string
		q      controller.Request
		learns bool // the map changes
		cal    bool // a new calibration
	}{
		{"a pre-position", controller.Request{Kind: controller.Preposition, Freq: f80}, false, false},
		{"the same pre-position", controller.Request{Kind: controller.Preposition, Freq: f80}, false, false},
		{"a tune", controller.Request{Kind: controller.Tune, Freq: f80}, true, false},
		{"a calibration", controller.Request{Kind: controller.Calibrate, Freq: f80}, true, true},
		{"the same calibration", controller.Request{Kind: controller.Calibrate, Freq: f80}, true, false},
		{"a reference where the motor is", controller.Request{Kind: controller.Reference}, false, false},
		{"a goto", controller.Request{Kind: controller.Goto, Step: 30000}, false, false},
	}
	var backlash int64
	for _, s := range steps {
		before := r.Axis.Position()
		if s.q.Kind == controller.Reference {
			s.q.Step = before
		}
		_, res := r.Do(t, s.q)
		if res.Err != nil {
			t.Fatalf("%s: %s (%v)", s.what, res.Outcome, res.Err)
		}
		if s.learns != (res.Learned > 0) {
			t.Fatalf("%s learned %d points; the test expects it to learn: %v", s.what, res.Learned, s.learns)
		}
		if res.Outcome == tune.Calibrated {
			if s.cal == (res.Backlash == backlash) {
				t.Fatalf("%s measured %d steps after %d; the test expects a change: %v", s.what, res.Backlash, backlash, s.cal)
			}
			backlash = res.Backlash
		}
		if s.learns {
			want.Map++
		}
		if s.cal {
			want.Calibration++
		}
		if r.Axis.Position() != before {
			want.Hint++
		}
		check(s.what)
	}
	if want.Hint < 3 {
		t.Fatalf("only %d of the operations moved the motor: the test means to see hints written and not", want.Hint)
	}
	stop()
	check("the way out, with nothing new since the last save")
	h, ok, err := dir.Hint()
	if err != nil || !ok || h.Position != r.Axis.Position() {
		t.Fatalf("hint on disk: %+v, %v, %v; want the last position %d", h, ok, err, r.Axis.Position())
	}
	// A second run on the same directory starts from what the first saved, and writes nothing
	// it did not change.
	dir.Close()
	dir2 := openDir(t, dir.Path())
	st2 := loadState(t, dir2)
	if c, ok := st2.Calibration(); !ok || c.Backlash != backlash {
		t.Fatalf("calibration loaded: %+v, %v; want %d", c, ok, backlash)
	}
	if hint, ok := st2.Hint(); !ok || hint.Position != h.Position {
		t.Fatalf("hint loaded: %+v, %v", hint, ok)
	}
	if st2.Map().Len() != 1 || len(st2.Notices()) != 0 {
		t.Fatalf("second start: %d map points, notices %q", st2.Map().Len(), st2.Notices())
	}
	r2 := newRig(t, rigOptions{svc: controller.Options{State: st2}})
	if !r2.Service.Tuner().Calibrated() || r2.Axis.Snapshot().Backlash != backlash {
		t.Fatalf("the stored calibration was not installed: calibrated %v, axis backlash %d", r2.Service.Tuner().Calibrated(), r2.Axis.Snapshot().Backlash)
	}
	r2.Start(t)()
	if w := st2.Writes(); w != (controller.StateWrites{}) {
		t.Fatalf("a run that did nothing wrote %+v", w)
	}
}

// Damaged files are set aside (renamed, never deleted), the state starts without them, and the
// operator hears of it in the snapshot; the next good tune writes a fresh map.
func TestStateSetsAsideDamagedFiles(t *testing.T) {
	path := t.TempDir()
	for _, name := range []string{statedir.MapFile, statedir.CalibrationFile} {
		if err := os.WriteFile(filepath.Join(path, name), []byte("torn in half by a power cut\n"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	dir := openDir(t, path)
	st := loadState(t, dir)
	if st.Map().Len() != 0 {
		t.Fatalf("a damaged map loaded %d points", st.Map().Len())
	}
	if _, ok := st.Calibration(); ok {
		t.Fatal("a damaged calibration loaded")
	}
	notices := st.Notices()
	if len(notices) != 2 || !strings.Contains(notices[0], "set aside") || !strings.Contains(notices[1], "set aside") {
		t.Fatalf("notices %q, want the map and the calibration set aside", notices)
	}
	for _, name := range []string{statedir.MapFile, statedir.CalibrationFile} {
		aside, _ := filepath.Glob(filepath.Join(path, name+".damaged-*"))
		if _, err := os.Stat(filepath.Join(path, name)); len(aside) != 1 || !errors.Is(err, os.ErrNotExist) {
			t.Fatalf("%s: set aside as %v, still there: %v", name, aside, err)
		}
	}
	r := newRig(t, rigOptions{svc: controller.Options{State: st, Notices: []string{"the daemon's own"}}})
	if got := r.Service.Snapshot().Notices; len(got) != 3 || got[0] != notices[0] || got[2] != "the daemon's own" {
		t.Fatalf("snapshot notices %q", got)
	}
	r.Start(t)
	tuneAt(t, r, f80)
	if m, err := memmap.Load(dir.MapPath(), memmap.Options{}); err != nil || m.Len() != 1 {
		t.Fatalf("map written after the tune: %v, %v", m, err)
	}
}

// A calibration that cannot be read for another reason than damage is left alone: the backlash
// is measured again, and the new measurement is not written over the file.
func TestStateLeavesAnUnreadableCalibrationAlone(t *testing.T) {
	path := t.TempDir()
	// A directory where the file should be: reading it fails, and not as corrupt data.
	if err := os.Mkdir(filepath.Join(path, statedir.CalibrationFile), 0o700); err != nil {
		t.Fatal(err)
	}
	dir := openDir(t, path)
	st := loadState(t, dir)
	if len(st.Notices()) != 1 {
		t.Fatalf("notices %q, want one about the calibration", st.Notices())
	}
	r := newRig(t, rigOptions{svc: controller.Options{State: st}})
	r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	if _, res := r.Do(t, controller.Request{Kind: controller.Calibrate, Freq: f80}); res.Outcome != tune.Calibrated {
		t.Fatalf("calibrate: %s (%v)", res.Outcome, res.Err)
	}
	if w := st.Writes(); w.Calibration != 0 {
		t.Fatalf("%d calibration writes over a file left alone", w.Calibration)
	}
	if fi, err := os.Stat(dir.CalibrationPath()); err != nil || !fi.IsDir() {
		t.Fatalf("the unreadable calibration was touched: %v, %v", fi, err)
	}
}

// A map of a format this build does not read fails the load: starting empty would save over
// newer data.
func TestStateRefusesANewerMap(t *testing.T) {
	path := t.TempDir()
	if err := store.WriteFile(filepath.Join(path, statedir.MapFile), []byte("tankd-tunemap 99\n")); err != nil {
		t.Fatal(err)
	}
	dir := openDir(t, path)
	l, err := fakeloop.New(fakeloop.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := controller.LoadState(dir, controller.StateOptions{Map: memmap.Options{Prior: l.Prior}}); !errors.Is(err, memmap.ErrVersion) {
		t.Fatalf("LoadState over a newer map: %v, want ErrVersion", err)
	}
	if aside, _ := filepath.Glob(filepath.Join(path, "*.damaged-*")); len(aside) != 0 {
		t.Fatalf("a newer map was set aside as %v", aside)
	}
}
