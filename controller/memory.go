package controller

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
)

// The memory map as clients of the service see it: read at any time (the map guards itself),
// changed only between operations, on Run's goroutine, so that no operation ever sees the map
// change under it (a tune predicts from the map before it moves and teaches it after it
// verifies: a map replaced in between would be taught a point it did not predict).

// ErrNoPoint: the memory map holds no point at the frequency given.
var ErrNoPoint = errors.New("no such point in the memory map")

// MaxImportPoints bounds a map import: four times the map's default bound
// (memmap.DefaultMaxPoints). A file with more was not written by a map of this daemon, and the
// map would drop the excess anyway.
const MaxImportPoints = 4 * memmap.DefaultMaxPoints

// MapPoints returns the memory map's learned points, sorted by frequency.
func (s *Service) MapPoints() []memmap.Point { return s.d.Map.Points() }

// ExportMap writes the memory map's points as CSV (memmap.Map.ExportCSV).
func (s *Service) ExportMap(w io.Writer) error { return s.d.Map.ExportCSV(w) }

// SoftLimits are the motor positions no move may pass (a Goto outside them is refused).
func (s *Service) SoftLimits() (lo, hi motion.Steps) { return s.d.Axis.SoftLimits() }

// HasHome says whether the loop has a home switch (a Home is refused without one).
func (s *Service) HasHome() bool { return s.to.HasHome }

// PointError is what is wrong with one point of an import.
type PointError struct {
	Index int    // in the list given, from 0
	Field string // the CSV column (and JSON key): frequency_hz, position, temperature_c, swr, q; "" for the point as a whole
	Err   error
}

// Error implements error.
func (e PointError) Error() string {
	if e.Field == "" {
		return fmt.Sprintf("point %d: %v", e.Index, e.Err)
	}
	return fmt.Sprintf("point %d: %s: %v", e.Index, e.Field, e.Err)
}

// Unwrap gives the cause.
func (e PointError) Unwrap() error { return e.Err }

// PointsError lists every bad point of an import; nothing of it was applied.
type PointsError []PointError

// Error implements error.
func (e PointsError) Error() string {
	msgs := make([]string, len(e))
	for i, pe := range e {
		msgs[i] = pe.Error()
	}
	return "memory map points: " + strings.Join(msgs, "; ")
}

// CheckPoints reports every point that ImportMap would refuse, each with its field, as a
// PointsError; nil if all are good. A point must be one a tune of this loop could have
// learned: a positive frequency, a position inside the soft limits, a temperature above
// absolute zero, an SWR unknown (0) or finite and at least 1, a Q unknown (0) or finite and
// positive.
func (s *Service) CheckPoints(pts []memmap.Point) error {
	if len(pts) > MaxImportPoints {
		return PointsError{{Index: MaxImportPoints, Err: fmt.Errorf("%d points: want at most %d", len(pts), MaxImportPoints)}}
	}
	lo, hi := s.SoftLimits()
	var bad PointsError
	for i, p := range pts {
		n := len(bad)
		if p.Freq <= 0 {
			bad = append(bad, PointError{i, "frequency_hz", fmt.Errorf("%v: want more than 0", p.Freq)})
		}
		if p.Pos < lo || p.Pos > hi {
			bad = append(bad, PointError{i, "position", fmt.Errorf("%d: outside the soft limits %d–%d", p.Pos, lo, hi)})
		}
		if p.HasTemp && p.Temp < 0 {
			bad = append(bad, PointError{i, "temperature_c", errors.New("below absolute zero")})
		}
		if !(p.SWR == 0 || p.SWR >= 1 && p.SWR <= maxFinite) {
			bad = append(bad, PointError{i, "swr", fmt.Errorf("%g: want 0 (unknown) or a finite value of at least 1", p.SWR)})
		}
		if !(p.Q >= 0 && p.Q <= maxFinite) {
			bad = append(bad, PointError{i, "q", fmt.Errorf("%g: want 0 (unknown) or a finite positive value", p.Q)})
		}
		if len(bad) > n {
			continue
		}
		// Whatever else the map itself refuses (its own rules may grow), found on a scratch map:
		// options do not change what a point may be.
		scratch, err := memmap.New(memmap.Options{})
		if err == nil {
			err = scratch.Learn(p)
		}
		if err != nil {
			bad = append(bad, PointError{Index: i, Err: err})
		}
	}
	if len(bad) > 0 {
		return bad
	}
	return nil
}

// maxFinite is the largest float64: comparisons with it refuse NaN and the infinities.
const maxFinite = 1.7976931348623157e308

// MapImport says what ImportMap did.
type MapImport struct {
	// Before and After count the map's points before and after. After may be less than the
	// points given: points within the map's merge distance of one another become one (the
	// newer wins), and the map holds at most its bound.
	Before, After int
	// Aside is the file the previous map was written to, beside the map file, named
	// loop.map.before-import-<UTC time>; empty without a state directory.
	Aside string
}

// ImportMap replaces the memory map's points with pts, between operations (it waits for the
// running one to end), learning them in time order so that the drift estimate is rebuilt from
// them. The points are checked first (CheckPoints): one bad point refuses them all, with a
// PointsError. With a state directory the map in use is first written aside (MapImport.Aside)
// and the new one saved; if the old one cannot be written aside, nothing changes. It fails with
// ctx's error if ctx ends before the run loop gets to it (then nothing changes), and with
// ErrStopped once Run has returned.
func (s *Service) ImportMap(ctx context.Context, pts []memmap.Point) (MapImport, error) {
	if err := s.CheckPoints(pts); err != nil {
		return MapImport{}, fmt.Errorf("service: import map: %w", err)
	}
	sorted := byTime(pts)
	var out MapImport
	err := s.between(ctx, func() error {
		m := s.d.Map
		out.Before = m.Len()
		if s.store != nil {
			aside, err := s.store.keepAside("before-import")
			if err != nil {
				return fmt.Errorf("service: import map: the map in use could not be kept, so it stays: %w", err)
			}
			out.Aside = aside
		}
		old := byTime(m.Points())
		m.Reset()
		if err := learnAll(m, sorted); err != nil {
			// CheckPoints learned every point on a scratch map already: this is a bug.
			m.Reset()
			if rerr := learnAll(m, old); rerr != nil {
				s.log.Error("memory map: the previous points could not be learned again", "err", rerr)
			}
			s.republish()
			return fmt.Errorf("service: import map: %w (the previous points were learned again)", err)
		}
		out.After = m.Len()
		s.republish()
		s.log.Info("memory map imported", "points", len(pts), "before", out.Before, "after", out.After, "aside", out.Aside)
		if s.store != nil {
			if err := s.store.saveMapNow(); err != nil {
				return fmt.Errorf("service: import map: the new map is in use but not saved: %w", err)
			}
		}
		return nil
	})
	return out, err
}

// ForgetPoint removes the map's point nearest to f, if it lies within tolerance of f, between
// operations, and saves the map; it returns the point removed, or an error wrapping ErrNoPoint.
// Like ImportMap it fails with ctx's error or ErrStopped if the run loop never gets to it.
func (s *Service) ForgetPoint(ctx context.Context, f, tolerance physic.Frequency) (memmap.Point, error) {
	var gone memmap.Point
	err := s.between(ctx, func() error {
		pts := s.d.Map.Points()
		best := -1
		for i, p := range pts {
			if d := absFreq(p.Freq - f); d <= tolerance && (best < 0 || d < absFreq(pts[best].Freq-f)) {
				best = i
			}
		}
		if best < 0 {
			return fmt.Errorf("service: forget %v: %w", f, ErrNoPoint)
		}
		gone = pts[best]
		s.d.Map.Forget(func(p memmap.Point) bool { return p.Freq == gone.Freq })
		s.republish()
		s.log.Info("memory map point forgotten", "freq", gone.Freq, "pos", gone.Pos)
		if s.store != nil {
			if err := s.store.saveMapNow(); err != nil {
				return fmt.Errorf("service: forget %v: forgotten, but the map is not saved: %w", gone.Freq, err)
			}
		}
		return nil
	})
	return gone, err
}

func absFreq(f physic.Frequency) physic.Frequency {
	if f < 0 {
		return -f
	}
	return f
}

// byTime returns the points sorted by time, those of unknown time first, in their order
// otherwise: the order memmap.Map.Learn wants them in.
func byTime(pts []memmap.Point) []memmap.Point {
	out := slices.Clone(pts)
	slices.SortStableFunc(out, func(a, b memmap.Point) int { return a.At.Compare(b.At) })
	return out
}

// learnAll learns pts in order. A point that a newer one near it supersedes is no error.
func learnAll(m *memmap.Map, pts []memmap.Point) error {
	for _, p := range pts {
		if err := m.Learn(p); err != nil && !errors.Is(err, memmap.ErrSuperseded) {
			return err
		}
	}
	return nil
}

// republish publishes the snapshot afresh (the map's point count changed).
func (s *Service) republish() {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.publishLocked()
}

// editQueue holds work for Run's goroutine to do between operations.
type editQueue struct {
	mu sync.Mutex
	q  []*edit
	// queued, if set, is called once an edit has been queued (tests: export_test.go).
	queued func()
}

// The states of an edit: waiting for Run; taken by Run (it runs, or has run); withdrawn by its
// caller, who stopped waiting (Run skips it).
const (
	editWaiting int32 = iota
	editTaken
	editWithdrawn
)

type edit struct {
	run   func() error
	state atomic.Int32
	err   error         // set before done is closed
	done  chan struct{} // closed once run has returned
}

// between runs f on Run's goroutine with no operation running, before the next request starts,
// and returns its error. If ctx ends or Run returns before Run has taken f, f never runs.
func (s *Service) between(ctx context.Context, f func() error) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	select {
	case <-s.done:
		return ErrStopped
	default:
	}
	e := &edit{run: f, done: make(chan struct{})}
	s.edits.mu.Lock()
	s.edits.q = append(s.edits.q, e)
	queued := s.edits.queued
	s.edits.mu.Unlock()
	if queued != nil {
		queued()
	}
	s.kick()
	select {
	case <-e.done:
		return e.err
	case <-ctx.Done():
		if e.state.CompareAndSwap(editWaiting, editWithdrawn) {
			return ctx.Err()
		}
	case <-s.done:
		if e.state.CompareAndSwap(editWaiting, editWithdrawn) {
			return ErrStopped
		}
	}
	<-e.done // Run took it: it is quick, and ends
	return e.err
}

// applyEdits runs the edits waiting, in the order they came; on Run's goroutine, between
// operations. A panic in one latches a fault, as any panic in the service does.
func (s *Service) applyEdits() {
	s.edits.mu.Lock()
	q := s.edits.q
	s.edits.q = nil
	s.edits.mu.Unlock()
	for _, e := range q {
		if !e.state.CompareAndSwap(editWaiting, editTaken) {
			continue
		}
		e.err = fmt.Errorf("service: %w: the edit panicked", tune.ErrInternal)
		s.guarded(func() { e.err = e.run() })
		close(e.done)
	}
}

// keepAside writes the map in use beside the map file, as loop.map.<why>-<UTC time> (with -2,
// -3… should that be taken), through controller/store so that it carries its checksum and
// memmap.Load reads it back. It returns the file's path.
func (st *State) keepAside(why string) (string, error) {
	st.mu.Lock()
	defer st.mu.Unlock()
	base := st.dir.MapPath() + "." + why + "-" + st.clk.Now().UTC().Format(asideTime)
	for i := 1; i <= maxAsideNames; i++ {
		name := base
		if i > 1 {
			name += "-" + strconv.Itoa(i)
		}
		switch _, err := os.Lstat(name); {
		case err == nil:
			continue
		case !errors.Is(err, fs.ErrNotExist):
			return "", fmt.Errorf("state: keep the map aside: %w", err)
		}
		if err := st.m.Save(name); err != nil {
			return "", fmt.Errorf("state: keep the map aside: %w", err)
		}
		return name, nil
	}
	return "", fmt.Errorf("state: keep the map aside: %s and the %d names after it are all taken", base, maxAsideNames-1)
}

// asideTime stamps the copies kept aside, as controller/store stamps damaged ones.
const asideTime = "20060102T150405Z"

// maxAsideNames bounds the names tried for one copy kept aside: more than anyone imports in one
// second.
const maxAsideNames = 100

// saveMapNow writes the map if it changed since it was loaded or last saved, and says whether
// that failed (saveMap, after operations, only logs).
func (st *State) saveMapNow() error {
	st.mu.Lock()
	defer st.mu.Unlock()
	sum := fingerprint(st.m)
	if sum == st.mapSum {
		return nil
	}
	if err := st.m.Save(st.dir.MapPath()); err != nil {
		return fmt.Errorf("state: save the memory map: %w", err)
	}
	st.mapSum = sum
	st.writes.Map++
	return nil
}
