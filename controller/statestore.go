package controller

import (
	"crypto/sha256"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"strings"
	"sync"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/store"
	"github.com/tankd/tankd/controller/tune"
)

// State is the loop's learned state in the daemon's state directory: the memory map, the
// backlash calibration and the position hint, loaded in one place and written back by the
// Service that owns it (Options.State), each only when it changed: the directory may be on an SD
// card, which wears with every write.
//
// Loading follows controller/store's rules. A file whose every copy is damaged is set aside
// (renamed, never deleted) and the state starts without it, saying so loudly in the log and in
// Notices (the snapshot carries them). A file taken from its previous copy is used, with a
// warning. A map that cannot be read for another reason (a newer format, an I/O error) fails
// LoadState: starting empty would save over it. A calibration that cannot be read for such a
// reason is left alone and not written for the rest of the run; the backlash is measured again.
//
// The clean-stop marker is not State's: the daemon writes it after Run has returned, from
// Service.CleanStop.
type State struct {
	dir *statedir.Dir
	clk clock.Clock
	log *slog.Logger
	m   *memmap.Map

	// Set by LoadState, read-only after.
	notices  []string
	cal      tune.Calibration
	hasCal   bool
	calFixed bool // the calibration file must not be written this run
	hint     statedir.Marker
	hinted   bool

	mu       sync.Mutex
	mapSum   [sha256.Size]byte // of the map as last loaded or saved
	savedCal *tune.Calibration // the calibration on disk, as far as this run knows
	hintPos  motion.Steps      // the position in the hint on disk
	hintOK   bool
	writes   StateWrites
}

// StateOptions configure LoadState.
type StateOptions struct {
	// Map are the memory map's options (its prior, above all).
	Map memmap.Options
	// Clock stamps the position hint and names the copies set aside; default the wall clock.
	Clock  clock.Clock
	Logger *slog.Logger
}

// StateWrites counts the files State has written since it was loaded.
type StateWrites struct {
	Map, Calibration, Hint int
}

// LoadState loads the memory map, the calibration and the position hint from dir. See State
// for what becomes of damaged and unreadable files.
func LoadState(dir *statedir.Dir, o StateOptions) (*State, error) {
	if dir == nil {
		return nil, errors.New("state: no state directory")
	}
	if o.Clock == nil {
		o.Clock = clock.Wall{}
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	st := &State{dir: dir, clk: o.Clock, log: o.Logger.With("component", "state")}
	if err := st.loadMap(o.Map); err != nil {
		return nil, err
	}
	st.loadCalibration()
	switch h, ok, err := dir.Hint(); {
	case err != nil:
		st.log.Warn("position hint unreadable", "err", err)
	case ok:
		st.hint, st.hinted = h, true
		st.hintPos, st.hintOK = h.Position, true
	}
	st.mapSum = fingerprint(st.m)
	if st.hasCal {
		c := st.cal
		st.savedCal = &c
	}
	return st, nil
}

func (st *State) loadMap(mo memmap.Options) error {
	path := st.dir.MapPath()
	m, err := memmap.Load(path, mo)
	switch {
	case err == nil:
	case errors.Is(err, store.ErrUsedPrevious):
		st.log.Warn("memory map: the last save was damaged; using the copy before it", "err", err)
	case errors.Is(err, store.ErrCorrupt):
		aside, aerr := store.SetAside(path, st.clk.Now())
		if aerr != nil {
			return fmt.Errorf("state: memory map damaged, and could not be set aside: %w (%w)", err, aerr)
		}
		n := fmt.Sprintf("the memory map was damaged beyond repair and has been set aside as %s: starting with an empty map", strings.Join(aside, ", "))
		st.log.Error("MEMORY MAP LOST: "+n, "err", err)
		st.notices = append(st.notices, n)
		if m, err = memmap.New(mo); err != nil {
			return fmt.Errorf("state: %w", err)
		}
	default:
		return fmt.Errorf("state: memory map: %w", err)
	}
	st.m = m
	st.log.Info("memory map", "path", path, "points", m.Len())
	return nil
}

func (st *State) loadCalibration() {
	path := st.dir.CalibrationPath()
	c, err := tune.LoadCalibration(path)
	switch {
	case err == nil || errors.Is(err, store.ErrUsedPrevious):
		if err != nil {
			st.log.Warn("backlash calibration: the last save was damaged; using the copy before it", "err", err)
		}
		st.cal, st.hasCal = c, true
		st.log.Info("backlash calibration", "steps", c.Backlash, "measured", c.At)
	case errors.Is(err, fs.ErrNotExist):
		st.log.Info("no backlash calibration yet: a calibration measures it")
	case errors.Is(err, store.ErrCorrupt):
		aside, aerr := store.SetAside(path, st.clk.Now())
		var n string
		if aerr != nil {
			st.calFixed = true
			n = fmt.Sprintf("the backlash calibration is damaged and could not be set aside (%v): it will be measured again, and not saved this run", aerr)
		} else {
			n = fmt.Sprintf("the backlash calibration was damaged and has been set aside as %s: it will be measured again", strings.Join(aside, ", "))
		}
		st.log.Error("BACKLASH CALIBRATION LOST: "+n, "err", err)
		st.notices = append(st.notices, n)
	default:
		st.calFixed = true
		n := fmt.Sprintf("the backlash calibration could not be read (%v): it is left as it is, measured again, and not saved this run", err)
		st.log.Error(n, "err", err)
		st.notices = append(st.notices, n)
	}
}

// Map is the memory map loaded (empty if there was none, or it was damaged).
func (st *State) Map() *memmap.Map { return st.m }

// Calibration is the stored backlash calibration, if there is a usable one. The Service
// installs it in the tuner.
func (st *State) Calibration() (tune.Calibration, bool) { return st.cal, st.hasCal }

// Hint is the position hint as loaded: where the motor was after the last run's latest
// operation. It is never to be trusted, but after a crash it is a first guess for finding the
// position again.
func (st *State) Hint() (statedir.Marker, bool) { return st.hint, st.hinted }

// Notices are what the operator must hear of from loading: damaged files set aside, files left
// alone.
func (st *State) Notices() []string { return append([]string(nil), st.notices...) }

// Writes counts the files written since LoadState.
func (st *State) Writes() StateWrites {
	st.mu.Lock()
	defer st.mu.Unlock()
	return st.writes
}

// fingerprint sums what a map file would hold: its points and its drift estimate.
func fingerprint(m *memmap.Map) [sha256.Size]byte {
	h := sha256.New()
	if err := m.ExportCSV(h); err != nil {
		fmt.Fprintf(h, "export failed: %v", err) // never equal to a good sum
	}
	fmt.Fprintf(h, "%+v", m.Drift())
	var sum [sha256.Size]byte
	h.Sum(sum[:0])
	return sum
}

// saveMap writes the map if it changed since it was loaded or last saved.
func (st *State) saveMap() {
	st.mu.Lock()
	defer st.mu.Unlock()
	sum := fingerprint(st.m)
	if sum == st.mapSum {
		return
	}
	if err := st.m.Save(st.dir.MapPath()); err != nil {
		st.log.Error("could not save the memory map", "path", st.dir.MapPath(), "err", err)
		return
	}
	st.mapSum = sum
	st.writes.Map++
}

// saveCalibration writes c if its backlash differs from the stored one (or none is stored).
func (st *State) saveCalibration(c tune.Calibration) {
	st.mu.Lock()
	defer st.mu.Unlock()
	if st.calFixed {
		st.log.Warn("new backlash calibration not saved: the file is left alone this run", "steps", c.Backlash)
		return
	}
	if st.savedCal != nil && st.savedCal.Backlash == c.Backlash {
		return
	}
	if err := tune.SaveCalibration(st.dir.CalibrationPath(), c); err != nil {
		st.log.Error("could not save the backlash calibration", "path", st.dir.CalibrationPath(), "err", err)
		return
	}
	st.savedCal = &c
	st.writes.Calibration++
}

// noteAxis writes the position hint if the motor stands somewhere else than the hint says.
func (st *State) noteAxis(a motion.AxisState) {
	if a.Moving {
		return
	}
	st.mu.Lock()
	defer st.mu.Unlock()
	if st.hintOK && st.hintPos == a.Position {
		return
	}
	m := statedir.Marker{Position: a.Position, Trusted: a.Trusted && a.Fault == "", At: st.clk.Now(), Reason: "after an operation"}
	if err := st.dir.WriteHint(m); err != nil {
		st.log.Warn("position hint not saved", "err", err)
		return
	}
	st.hintPos, st.hintOK = a.Position, true
	st.writes.Hint++
}
