// Package fakeservice builds a real controller.Service on a fakeloop.Loop, for the tests of the
// service's clients (the HTTP API) that need the service itself and may not use the simulator.
//
// # What the caller must do
//
// Build a Rig with New, set any hooks on its Loop (Clock.OnSleep, Sensor.OnRead) and submit any
// request that must be waiting before Run starts, then Start it. Start registers the stop with
// the test's Cleanup; call the stop it returns to end Run earlier. Put the radio on a frequency
// (Loop.Radio.SetFrequency) before asking for an RF tune there.
package fakeservice

import (
	"context"
	"sync"
	"testing"
	"time"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/tune"
)

// Nominal is the gear play the controller assumes before a calibration: the fake loop's 40
// steps and half again, plus 4 (the rule the station descriptions use; from memory).
const Nominal = 64

// Safety bounds every wait for the service's goroutine: only a safety net for a broken service,
// since on the virtual clock an operation takes microseconds of real time.
const Safety = 30 * time.Second

// Options say what to build. The zero value is a trusted loop without a home switch, a service
// that does not tune on a Follow, no state directory and no follower.
type Options struct {
	Loop fakeloop.Options
	// Tune are the tuner's options; Transmit, NominalBacklash and HasHome are filled in.
	Tune    tune.Options
	Service controller.Options
	// StateDir, if set, is opened as the state directory: the map is loaded from it and saved to
	// it.
	StateDir string
	// Untrusted leaves the axis unreferenced (a loop with a home switch then homes first).
	Untrusted bool
	// Follower, if set, builds a follower with these options.
	Follower *controller.FollowOptions
}

// Rig is a service on a fake loop.
type Rig struct {
	Loop     *fakeloop.Loop
	Axis     *motion.Axis
	Service  *controller.Service
	Follower *controller.Follower // nil unless asked for
	State    *controller.State    // nil without a state directory
	Dir      *statedir.Dir        // nil without a state directory
}

// New builds the rig; it fails the test on any error.
func New(t testing.TB, o Options) *Rig {
	t.Helper()
	l, err := fakeloop.New(o.Loop)
	if err != nil {
		t.Fatal(err)
	}
	ax, err := motion.NewAxis(l.Drive, l.Clock, l.Switches(), l.AxisOptions(Nominal))
	if err != nil {
		t.Fatal(err)
	}
	if err := ax.Enable(context.Background()); err != nil {
		t.Fatal(err)
	}
	if !o.Untrusted {
		ax.Reference(l.Drive.Motor())
	}
	r := &Rig{Loop: l, Axis: ax}
	so := o.Service
	var m *memmap.Map // with a State, the State's
	if o.StateDir != "" {
		if r.Dir, err = statedir.Open(o.StateDir, statedir.Options{}); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { r.Dir.Close() })
		if r.State, err = controller.LoadState(r.Dir, controller.StateOptions{Map: memmap.Options{Prior: l.Prior}, Clock: l.Clock}); err != nil {
			t.Fatal(err)
		}
		so.State = r.State
	} else if m, err = memmap.New(memmap.Options{Prior: l.Prior}); err != nil {
		t.Fatal(err)
	}
	to := o.Tune
	to.Transmit, to.NominalBacklash, to.HasHome = true, Nominal, l.Home != nil
	if r.Service, err = controller.NewService(tune.Deps{Axis: ax, Sensor: l.Sensor, Clock: l.Clock, Map: m,
		Transmitter: l.Radio, Frequency: l.Radio, Thermometer: l.Thermometer}, to, so); err != nil {
		t.Fatal(err)
	}
	if o.Follower != nil {
		if r.Follower, err = controller.NewFollower(r.Service, *o.Follower); err != nil {
			t.Fatal(err)
		}
	}
	return r
}

// Start runs the service until the returned stop is called or the test ends, and checks that
// Run returns nil.
func (r *Rig) Start(t testing.TB) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	errc := make(chan error, 1)
	go func() { errc <- r.Service.Run(ctx) }()
	var once sync.Once
	stop = func() {
		once.Do(func() {
			cancel()
			select {
			case err := <-errc:
				if err != nil {
					t.Errorf("Run: %v", err)
				}
			case <-time.After(Safety):
				t.Error("Run did not return")
			}
		})
	}
	t.Cleanup(stop)
	return stop
}

// Wait blocks until request id is final and returns its status.
func (r *Rig) Wait(t testing.TB, id controller.RequestID) controller.RequestStatus {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), Safety)
	defer cancel()
	st, err := r.Service.Wait(ctx, id)
	if err != nil {
		t.Fatalf("wait for request %d: %v", id, err)
	}
	return st
}

// Until wraps f for a hook on the service's goroutine: f runs at every call until it reports
// that it acted, then never again.
func Until(f func() bool) func() {
	done := false
	return func() {
		if !done {
			done = f()
		}
	}
}
