// Package fakeservice builds a real controller.Service on a fakeloop.Loop, for the tests that
// need the service itself and may not use the simulator: the service's own, and those of its
// clients (the HTTP API, the metrics, the sweep store). Its parts (NewAxis, TunerDeps,
// TuneOptions) also put a bare tuner on a fake loop.
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
// that does not tune on a Follow, no state and no follower.
type Options struct {
	Loop fakeloop.Options
	// Tune are the tuner's options; Transmit, NominalBacklash and HasHome are filled in.
	Tune tune.Options
	// Service are the service's options. A State given here is the caller's (loaded on another
	// clock, or shared between rigs); the tuner then uses its map.
	Service controller.Options
	// StateDir, if set, is opened as the state directory: the map is loaded from it and saved to
	// it. It replaces any Service.State.
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
	Map      *memmap.Map // the tuner's: the State's if there is one
	Service  *controller.Service
	Follower *controller.Follower // nil unless asked for
	State    *controller.State    // nil without a state
	Dir      *statedir.Dir        // nil without a state directory
}

// New builds the rig; it fails the test on any error.
func New(t testing.TB, o Options) *Rig {
	t.Helper()
	l, err := fakeloop.New(o.Loop)
	if err != nil {
		t.Fatal(err)
	}
	r := &Rig{Loop: l, Axis: NewAxis(t, l, o.Untrusted), State: o.Service.State}
	so := o.Service
	if o.StateDir != "" {
		if r.Dir, err = statedir.Open(o.StateDir, statedir.Options{}); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { r.Dir.Close() })
		if r.State, err = controller.LoadState(r.Dir, controller.StateOptions{Map: memmap.Options{Prior: l.Prior}, Clock: l.Clock}); err != nil {
			t.Fatal(err)
		}
		so.State = r.State
	}
	if r.State != nil {
		r.Map = r.State.Map()
	} else if r.Map, err = memmap.New(memmap.Options{Prior: l.Prior}); err != nil {
		t.Fatal(err)
	}
	if r.Service, err = controller.NewService(TunerDeps(l, r.Axis, r.Map), TuneOptions(l, o.Tune), so); err != nil {
		t.Fatal(err)
	}
	if o.Follower != nil {
		if r.Follower, err = controller.NewFollower(r.Service, *o.Follower); err != nil {
			t.Fatal(err)
		}
	}
	return r
}

// NewAxis is an enabled axis on l with the Nominal play, referenced at the motor's position
// (an installer who knows where it is) unless untrusted; it fails the test on any error.
func NewAxis(t testing.TB, l *fakeloop.Loop, untrusted bool) *motion.Axis {
	t.Helper()
	ax, err := motion.NewAxis(l.Drive, l.Clock, l.Switches(), l.AxisOptions(Nominal))
	if err != nil {
		t.Fatal(err)
	}
	if err := ax.Enable(context.Background()); err != nil {
		t.Fatal(err)
	}
	if !untrusted {
		ax.Reference(l.Drive.Motor())
	}
	return ax
}

// TunerDeps are a tuner's dependencies on l, with ax and the map m.
func TunerDeps(l *fakeloop.Loop, ax *motion.Axis, m *memmap.Map) tune.Deps {
	return tune.Deps{Axis: ax, Sensor: l.Sensor, Clock: l.Clock, Map: m,
		Transmitter: l.Radio, Frequency: l.Radio, Thermometer: l.Thermometer}
}

// TuneOptions are o with what l decides filled in: a tune carrier, the Nominal play, and
// homing if l has a home switch.
func TuneOptions(l *fakeloop.Loop, o tune.Options) tune.Options {
	o.Transmit, o.NominalBacklash, o.HasHome = true, Nominal, l.Home != nil
	return o
}

// Start runs the service until the returned stop is called or the test ends, and checks that
// Run returns nil.
func (r *Rig) Start(t testing.TB) (stop func()) {
	t.Helper()
	return Go(t, "Run", r.Service.Run)
}

// Go runs run on a goroutine until the returned stop is called or the test ends; stop cancels
// run's context, waits for it (up to Safety) and checks that it returned nil. what names run in
// the test's errors. Stop is registered with the test's Cleanup and may be called more than
// once.
func Go(t testing.TB, what string, run func(context.Context) error) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	errc := make(chan error, 1)
	go func() { errc <- run(ctx) }()
	var once sync.Once
	stop = func() {
		once.Do(func() {
			cancel()
			select {
			case err := <-errc:
				if err != nil {
					t.Errorf("%s: %v", what, err)
				}
			case <-time.After(Safety):
				t.Errorf("%s did not return", what)
			}
		})
	}
	t.Cleanup(stop)
	return stop
}

// Submit submits q, from the API unless it names its source; it fails the test if q is
// refused.
func (r *Rig) Submit(t testing.TB, q controller.Request) controller.RequestID {
	t.Helper()
	if q.Source == "" {
		q.Source = controller.SourceAPI
	}
	id, err := r.Service.Submit(q)
	if err != nil {
		t.Fatalf("submit %+v: %v", q, err)
	}
	return id
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

// Do submits q as Submit does and waits for it; it fails the test unless the request ends with
// a result.
func (r *Rig) Do(t testing.TB, q controller.Request) (controller.RequestStatus, tune.Result) {
	t.Helper()
	st := r.Wait(t, r.Submit(t, q))
	if st.Result == nil {
		t.Fatalf("%s request %d ended %s without a result", q.Kind, st.ID, st.State)
	}
	return st, *st.Result
}

// Drain reads every event waiting in sub, without waiting for more.
func Drain(sub *controller.Subscription) []controller.Event {
	var out []controller.Event
	for {
		select {
		case e, ok := <-sub.Events():
			if !ok {
				return out
			}
			out = append(out, e)
		default:
			return out
		}
	}
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
