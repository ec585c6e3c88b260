package motion

import (
	"errors"
	"time"

	"github.com/tankd/tankd/sim/vclock"
)

// fakeDrive emits each move's pulses on the Profile's schedule against a virtual clock and
// records every one of them.
type fakeDrive struct {
	clk              *vclock.Clock
	enabled, running bool
	mv               Move
	t0               time.Time
	emitted          int64 // pulses of the current or last move
	net              int64 // signed sum of every pulse ever emitted
	onPulse          func(net int64)

	startErr, enableErr error // returned (once) by the next Start / Enable
	extra               int64 // pulses a broken drive emits beyond each plan
	starts              int
	abrupt, ramped      int // Stop calls that found a move running
	halts               int
}

func newFakeDrive(clk *vclock.Clock) *fakeDrive { return &fakeDrive{clk: clk} }

func (f *fakeDrive) sync() {
	if !f.running {
		return
	}
	el := f.clk.Now().Sub(f.t0)
	k := f.mv.Profile.StepsAt(el)
	done := el >= f.mv.Profile.Duration()
	if done {
		k += f.extra
	}
	for ; f.emitted < k; f.emitted++ {
		f.net += int64(f.mv.Dir)
		if f.onPulse != nil {
			f.onPulse(f.net)
		}
	}
	if done {
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
	f.mv, f.t0, f.emitted, f.running = m, f.clk.Now(), 0, true
	f.sync()
	return nil
}

func (f *fakeDrive) Progress() (int64, bool) {
	f.sync()
	return f.emitted, f.running
}

func (f *fakeDrive) Stop(ramp bool) {
	f.sync()
	if !f.running {
		return
	}
	if !ramp {
		f.abrupt++
		f.running = false
		return
	}
	f.ramped++
	f.mv.Profile = f.mv.Profile.StopAt(f.clk.Now().Sub(f.t0))
	f.sync()
}

func (f *fakeDrive) Enable(on bool) error {
	f.sync()
	if f.enableErr != nil {
		err := f.enableErr
		f.enableErr = nil
		return err
	}
	if !on {
		f.running = false
	}
	f.enabled = on
	return nil
}

func (f *fakeDrive) Halt() error {
	f.sync()
	f.halts++
	f.running, f.enabled = false, false
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
