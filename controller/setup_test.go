package controller_test

import (
	"context"
	"sync"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
)

// nominal is the gear play the controller assumes before a calibration: the fake loop's 40 steps
// and half again, plus 4 (the rule the station descriptions use; from memory).
const nominal = 64

// safety bounds every wait for the service's goroutine. It is only a safety net for a broken
// service: on the virtual clock an operation takes microseconds of real time.
const safety = 30 * time.Second

// Frequencies the tests use: on 80 m, 160 m and 40 m, where the fake loop tunes.
var (
	f80  = 3750 * physic.KiloHertz
	f80b = 3700 * physic.KiloHertz
	f160 = 1850 * physic.KiloHertz
	f40  = 7100 * physic.KiloHertz
)

// hw is the hardware's state when an operation was reported done.
type hw struct{ moving, keyed bool }

// rig is a service on a fake loop.
type rig struct {
	loop *fakeloop.Loop
	ax   *motion.Axis
	s    *controller.Service

	mu sync.Mutex
	hw map[controller.RequestID]hw
}

type rigOptions struct {
	loop fakeloop.Options
	tune tune.Options
	svc  controller.Options
	// untrusted leaves the axis unreferenced (a loop with a home switch then homes first)
	untrusted bool
}

func newRig(t *testing.T, o rigOptions) *rig {
	t.Helper()
	l, err := fakeloop.New(o.loop)
	if err != nil {
		t.Fatal(err)
	}
	ax, err := motion.NewAxis(l.Drive, l.Clock, l.Switches(), l.AxisOptions(nominal))
	if err != nil {
		t.Fatal(err)
	}
	if err := ax.Enable(context.Background()); err != nil {
		t.Fatal(err)
	}
	if !o.untrusted {
		ax.Reference(l.Drive.Motor())
	}
	var m *memmap.Map // with a State, the State's map (its options carry the prior)
	if o.svc.State == nil {
		if m, err = memmap.New(memmap.Options{Prior: l.Prior}); err != nil {
			t.Fatal(err)
		}
	}
	to := o.tune
	to.Transmit, to.NominalBacklash, to.HasHome = true, nominal, l.Home != nil
	r := &rig{loop: l, ax: ax, hw: map[controller.RequestID]hw{}}
	user := o.svc.AfterOperation
	o.svc.AfterOperation = func(st controller.RequestStatus) {
		r.mu.Lock()
		r.hw[st.ID] = hw{moving: ax.Snapshot().Moving, keyed: l.Radio.Transmitting()}
		r.mu.Unlock()
		if user != nil {
			user(st)
		}
	}
	s, err := controller.NewService(tune.Deps{Axis: ax, Sensor: l.Sensor, Clock: l.Clock, Map: m,
		Transmitter: l.Radio, Thermometer: l.Thermometer}, to, o.svc)
	if err != nil {
		t.Fatal(err)
	}
	r.s = s
	return r
}

// start runs the service until the returned stop is called (or the test ends), and checks that
// Run returns nil.
func (r *rig) start(t *testing.T) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	errc := make(chan error, 1)
	go func() { errc <- r.s.Run(ctx) }()
	var once sync.Once
	stop = func() {
		once.Do(func() {
			cancel()
			select {
			case err := <-errc:
				if err != nil {
					t.Errorf("Run: %v", err)
				}
			case <-time.After(safety):
				t.Error("Run did not return")
			}
		})
	}
	t.Cleanup(stop)
	return stop
}

func (r *rig) submit(t *testing.T, q controller.Request) controller.RequestID {
	t.Helper()
	if q.Source == "" {
		q.Source = controller.SourceAPI
	}
	id, err := r.s.Submit(q)
	if err != nil {
		t.Fatalf("submit %+v: %v", q, err)
	}
	return id
}

// wait blocks until request id is final.
func (r *rig) wait(t *testing.T, id controller.RequestID) controller.RequestStatus {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), safety)
	defer cancel()
	st, err := r.s.Wait(ctx, id)
	if err != nil {
		t.Fatalf("wait for request %d: %v", id, err)
	}
	return st
}

// run submits q and waits for it; the result must be there.
func (r *rig) run(t *testing.T, q controller.Request) (controller.RequestStatus, tune.Result) {
	t.Helper()
	st := r.wait(t, r.submit(t, q))
	if st.Result == nil {
		t.Fatalf("%s request %d ended %s without a result", q.Kind, st.ID, st.State)
	}
	return st, *st.Result
}

// hardware is the hardware's state when request id was reported done.
func (r *rig) hardware(id controller.RequestID) hw {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.hw[id]
}

// drain reads every event waiting in sub.
func drain(sub *controller.Subscription) []controller.Event {
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

// until runs f, as a hook on the service's goroutine, until it reports that it acted; then never
// again.
func until(f func() bool) func() {
	done := false
	return func() {
		if !done {
			done = f()
		}
	}
}
