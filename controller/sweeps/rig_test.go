package sweeps_test

import (
	"context"
	"os"
	"path/filepath"
	"sort"
	"sync"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/sweeps"
	"github.com/tankd/tankd/controller/tune"
)

// Frequencies on 80 m, where the fake loop tunes.
var (
	f80  = 3750 * physic.KiloHertz
	f80b = 3700 * physic.KiloHertz
)

// motorAt is the fake motor's position at an instant: the hardware's own account of where it
// went, for the test's expectations.
type motorAt struct {
	at    time.Time
	motor motion.Steps
}

// rig is a service on a fake loop, recorded by a store.
type rig struct {
	*fakeservice.Rig
	store   *sweeps.Store
	dir     string
	sub     *controller.Subscription // the store's
	capture *controller.Subscription // every event, for the test
	written chan sweeps.Info

	mu    sync.Mutex
	track []motorAt // every change of the motor's position, as seen at each sleep

	stopOnce     sync.Once
	stopService  func()
	stopStoreRun func()
}

type rigOptions struct {
	dir     string // default a new temporary directory
	store   sweeps.Options
	svc     controller.Options
	depth   int                    // the store's subscription; default sweeps.SubscriptionDepth
	onEvent func(controller.Event) // on the store's goroutine, before it takes the event
	onSleep func()                 // on the service's goroutine, at every sleep of the fake loop's clock
}

// newRig builds the rig and starts the service and the store's Run.
func newRig(t *testing.T, o rigOptions) *rig {
	t.Helper()
	if o.dir == "" {
		o.dir = filepath.Join(t.TempDir(), "sweeps")
	}
	st, err := sweeps.Open(o.dir, o.store)
	if err != nil {
		t.Fatal(err)
	}
	if o.depth == 0 {
		o.depth = sweeps.SubscriptionDepth
	}
	r := &rig{Rig: fakeservice.New(t, fakeservice.Options{Service: o.svc}), store: st, dir: o.dir,
		written: make(chan sweeps.Info, 64)}
	r.Loop.Clock.OnSleep(func() {
		r.note()
		if o.onSleep != nil {
			o.onSleep()
		}
	})
	sweeps.SetHooks(st, o.onEvent, func(i sweeps.Info) { r.written <- i })
	r.capture = r.Service.Subscribe(1 << 20)
	r.sub = r.Service.Subscribe(o.depth)
	r.stopService = r.Start(t)
	// The store's Run is ended by closing its subscription (see stop), not by its context, so
	// that it records what the service published last, as in the daemon.
	r.stopStoreRun = fakeservice.Go(t, "store Run", func(context.Context) error {
		return st.Run(context.Background(), r.sub)
	})
	t.Cleanup(r.stop)
	return r
}

// note keeps the motor's position if it changed; on the service's goroutine.
func (r *rig) note() {
	m, now := r.Loop.Drive.Motor(), r.Loop.Clock.Now()
	r.mu.Lock()
	defer r.mu.Unlock()
	if n := len(r.track); n == 0 || r.track[n-1].motor != m {
		r.track = append(r.track, motorAt{now, m})
	}
}

// travel is the direction of the motor's most recent travel at t, by the hardware's account.
func (r *rig) travel(t time.Time) motion.Direction {
	r.mu.Lock()
	defer r.mu.Unlock()
	for i := len(r.track) - 1; i > 0; i-- {
		a, b := r.track[i-1], r.track[i]
		if b.at.After(t) {
			continue
		}
		if b.motor > a.motor {
			return motion.Up
		}
		return motion.Down
	}
	return 0
}

// stop ends the service, then the store's Run (which drains the subscription first), the way
// the daemon does on the way out.
func (r *rig) stop() {
	r.stopOnce.Do(func() {
		r.stopService()
		r.sub.Close()
		r.capture.Close()
		r.stopStoreRun()
	})
}

// events is everything the service published; after stop.
func (r *rig) events() []controller.Event {
	var out []controller.Event
	for e := range r.capture.Events() {
		out = append(out, e)
	}
	return out
}

// tune tunes at f with the radio there; it must succeed.
func (r *rig) tune(t *testing.T, f physic.Frequency) controller.RequestStatus {
	t.Helper()
	r.Loop.Radio.SetFrequency(f)
	st, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f})
	if res.Outcome != tune.Tuned {
		t.Fatalf("tune at %v: %s (%v)", f, res.Outcome, res.Err)
	}
	return st
}

// nextWrite waits for the store to write a recording.
func (r *rig) nextWrite(t *testing.T) sweeps.Info {
	t.Helper()
	select {
	case i := <-r.written:
		return i
	case <-time.After(fakeservice.Safety):
		t.Fatal("no recording written")
		return sweeps.Info{}
	}
}

// read opens and parses recording id.
func read(t *testing.T, s *sweeps.Store, id string) (sweeps.Info, record.Header, []record.Sample) {
	t.Helper()
	info, rc, err := s.Open(id)
	if err != nil {
		t.Fatalf("Open(%q): %v", id, err)
	}
	defer rc.Close()
	h, samples, err := record.ReadAll(rc)
	if err != nil {
		t.Fatalf("recording %s does not parse: %v", id, err)
	}
	return info, h, samples
}

// files lists the directory's entries, sorted.
func files(t *testing.T, dir string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var out []string
	for _, e := range ents {
		out = append(out, e.Name())
	}
	sort.Strings(out)
	return out
}

// ids are the IDs in a listing.
func ids(l []sweeps.Info) []string {
	out := make([]string, len(l))
	for i, x := range l {
		out[i] = x.ID
	}
	return out
}

func size(t *testing.T, dir, id string) int64 {
	t.Helper()
	fi, err := os.Stat(filepath.Join(dir, id+".sweep"))
	if err != nil {
		t.Fatal(err)
	}
	return fi.Size()
}

func copyFile(t *testing.T, from, to string, edit func([]byte) []byte) {
	t.Helper()
	b, err := os.ReadFile(from)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(to, edit(b), 0o600); err != nil {
		t.Fatal(err)
	}
}
