package motion

import (
	"errors"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

// epoch is where every test's virtual clock starts: a fixed instant, so that runs are
// reproducible.
var epoch = time.Date(2026, time.January, 1, 0, 0, 0, 0, time.UTC)

// fakeDrive emits each move's pulses on the Profile's schedule against a virtual clock and
// records every one of them.
type fakeDrive struct {
	clk              *clock.Virtual
	enabled, running bool
	mv               Move
	plan             Profile // the current or last move's profile as started, before any stop
	t0               time.Time
	emitted          int64 // pulses of the current or last move
	net              int64 // signed sum of every pulse ever emitted
	onPulse          func(net int64)

	startErr, enableErr error // returned (once) by the next Start / Enable
	extra               int64 // pulses a broken drive emits beyond each plan
	starts              int
	abrupt, ramped      int // Stop calls that found a move running
	halts               int

	// Fault knobs of a hung drive. From the hangFrom-th Start on (1-based; 0 counts as 1), every
	// move hangs as hang says; deaf makes the drive ignore Stop, Enable(false) and Halt while a
	// hung move runs. slow above 1 stretches every move's timeline by that factor, as a pulse
	// generator that falls behind its plan.
	hang     hangMode
	hangFrom int
	freezeAt int64 // hangFrozen: the pulses emitted before the drive freezes
	deaf     bool
	slow     float64
	hung     bool // the current move hangs
	stops    int  // every Stop call, heard or not
}

// hangMode is how a hung drive fails to finish a move.
type hangMode int

const (
	hangNone   hangMode = iota
	hangFrozen          // the pulses stop at freezeAt, and Progress keeps saying running
	hangNoEnd           // every pulse goes out, but Progress never says the move ended
)

// unhang stands for the operator power-cycling a hung driver: the move is over.
func (f *fakeDrive) unhang() {
	f.sync()
	f.running, f.hung, f.hang, f.deaf = false, false, hangNone, false
}

// elapsed is the time into the current move on the drive's own, perhaps slow, timeline.
func (f *fakeDrive) elapsed() time.Duration {
	el := f.clk.Now().Sub(f.t0)
	if f.slow > 1 {
		el = time.Duration(float64(el) / f.slow)
	}
	return el
}

func newFakeDrive(clk *clock.Virtual) *fakeDrive { return &fakeDrive{clk: clk} }

func (f *fakeDrive) sync() {
	if !f.running {
		return
	}
	el := f.elapsed()
	k := f.mv.Profile.StepsAt(el)
	done := el >= f.mv.Profile.Duration()
	if done {
		k += f.extra
	}
	if f.hung && f.hang == hangFrozen {
		k = min(k, f.freezeAt)
	}
	for ; f.emitted < k; f.emitted++ {
		f.net += int64(f.mv.Dir)
		if f.onPulse != nil {
			f.onPulse(f.net)
		}
	}
	if done && !f.hung {
		f.running = false
	}
}

func (f *fakeDrive) Start(m Move) error {
	f.sync()
	switch {
	case f.running:
		return errors.New("fake drive: busy")
	case !f.enabled:
		return errors.New("fake drive: disabled")
	case f.startErr != nil:
		err := f.startErr
		f.startErr = nil
		return err
	}
	if err := m.Profile.Validate(); err != nil {
		return err
	}
	f.starts++
	f.mv, f.plan, f.t0, f.emitted, f.running = m, m.Profile, f.clk.Now(), 0, true
	f.hung = f.hang != hangNone && f.starts >= max(f.hangFrom, 1)
	f.sync()
	return nil
}

func (f *fakeDrive) Progress() (int64, bool) {
	f.sync()
	return f.emitted, f.running
}

func (f *fakeDrive) Stop(ramp bool) {
	f.stops++
	f.sync()
	if !f.running || f.deaf && f.hung {
		return
	}
	if !ramp {
		f.abrupt++
		f.running = false
		return
	}
	f.ramped++
	f.mv.Profile = f.mv.Profile.StopAt(f.elapsed())
	f.sync()
}

func (f *fakeDrive) Enable(on bool) error {
	f.sync()
	if f.enableErr != nil {
		err := f.enableErr
		f.enableErr = nil
		return err
	}
	if !on && !(f.deaf && f.hung) {
		f.running = false
	}
	f.enabled = on
	return nil
}

func (f *fakeDrive) Halt() error {
	f.sync()
	f.halts++
	if !(f.deaf && f.hung) {
		f.running = false
	}
	f.enabled = false
	return nil
}

func (f *fakeDrive) String() string { return "fake drive" }

// fakeSwitch is a switch the test sets by hand.
type fakeSwitch struct {
	name  string
	on    bool
	err   error
	reads int
}

func (s *fakeSwitch) Active() (bool, error) {
	s.reads++
	return s.on, s.err
}

func (s *fakeSwitch) String() string { return s.name }

// edgeSwitch is a switch on the fake mechanics: active at or below at (in the drive's pulse
// count), released once the count is above at+hyst again.
type edgeSwitch struct {
	d        *fakeDrive
	at, hyst int64
	on       bool
	stuck    bool // always active
	dead     bool // never active
}

func (s *edgeSwitch) Active() (bool, error) {
	s.d.sync()
	switch {
	case s.d.net <= s.at:
		s.on = true
	case s.d.net > s.at+s.hyst:
		s.on = false
	}
	return (s.on || s.stuck) && !s.dead, nil
}

func (s *edgeSwitch) String() string { return "home" }
