package controller_test

import (
	"sync"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/tune"
)

// Frequencies the tests use: on 80 m, 160 m and 40 m, where the fake loop tunes.
var (
	f80  = 3750 * physic.KiloHertz
	f80b = 3700 * physic.KiloHertz
	f160 = 1850 * physic.KiloHertz
	f40  = 7100 * physic.KiloHertz
)

// hw is the hardware's state when an operation was reported done.
type hw struct{ moving, keyed bool }

// rig is a service on a fake loop that notes the hardware's state at the end of every
// operation.
type rig struct {
	*fakeservice.Rig

	mu sync.Mutex
	hw map[controller.RequestID]hw
}

type rigOptions struct {
	loop fakeloop.Options
	tune tune.Options
	// svc are the service's options; a State is the test's own, loaded from a directory it
	// keeps.
	svc controller.Options
	// untrusted leaves the axis unreferenced (a loop with a home switch then homes first)
	untrusted bool
}

func newRig(t *testing.T, o rigOptions) *rig {
	t.Helper()
	r := &rig{hw: map[controller.RequestID]hw{}}
	user := o.svc.AfterOperation
	o.svc.AfterOperation = func(st controller.RequestStatus) {
		r.mu.Lock()
		r.hw[st.ID] = hw{moving: r.Axis.Snapshot().Moving, keyed: r.Loop.Radio.Transmitting()}
		r.mu.Unlock()
		if user != nil {
			user(st)
		}
	}
	r.Rig = fakeservice.New(t, fakeservice.Options{Loop: o.loop, Tune: o.tune, Service: o.svc, Untrusted: o.untrusted})
	return r
}

// openDir opens the state directory at path until the test ends.
func openDir(t *testing.T, path string) *statedir.Dir {
	t.Helper()
	dir, err := statedir.Open(path, statedir.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { dir.Close() })
	return dir
}

// loadState loads the state kept in dir, on a clock and a prior of its own.
func loadState(t *testing.T, dir *statedir.Dir) *controller.State {
	t.Helper()
	l, err := fakeloop.New(fakeloop.Options{})
	if err != nil {
		t.Fatal(err)
	}
	st, err := controller.LoadState(dir, controller.StateOptions{Map: memmap.Options{Prior: l.Prior}, Clock: l.Clock})
	if err != nil {
		t.Fatal(err)
	}
	return st
}

// hardware is the hardware's state when request id was reported done.
func (r *rig) hardware(id controller.RequestID) hw {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.hw[id]
}
