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
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/sweeps"
	"github.com/tankd/tankd/controller/tune"
)

// nominal is the gear play the controller assumes before a calibration: the fake loop's 40 steps
// and half again, plus 4 (the rule the station descriptions use; from memory).
const nominal = 64

// safety bounds every wait for another goroutine. It is only a safety net: on the virtual clock
// an operation takes microseconds of real time.
const safety = 30 * time.Second

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
	loop    *fakeloop.Loop
	svc     *controller.Service
	store   *sweeps.Store
	dir     string
	sub     *controller.Subscription // the store's
	capture *controller.Subscription // every event, for the test
	written chan sweeps.Info

	mu    sync.Mutex
	track []motorAt // every change of the motor's position, as seen at each sleep

	stopOnce sync.Once
	cancel   context.CancelFunc
	svcDone  chan error
	runDone  chan error
}

type rigOptions struct {
	dir     string // default a new temporary directory
	store   sweeps.Options
	svc     controller.Options
	depth   int                    // the store's subscription; default sweeps.SubscriptionDepth
	onEvent func(controller.Event) // on the store's goroutine, before it takes the event
	onSleep func()                 // on the service's goroutine, at every sleep of the fake loop's clock
}

func newRig(t *testing.T, o rigOptions) *rig {
	t.Helper()
	l, err := fakeloop.New(fakeloop.Options{})
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
	ax.Reference(l.Drive.Motor())
	m, err := memmap.New(memmap.Options{Prior: l.Prior})
	if err != nil {
		t.Fatal(err)
	}
	svc, err := controller.NewService(tune.Deps{Axis: ax, Sensor: l.Sensor, Clock: l.Clock, Map: m,
		Transmitter: l.Radio, Thermometer: l.Thermometer},
		tune.Options{Transmit: true, NominalBacklash: nominal}, o.svc)
	if err != nil {
		t.Fatal(err)
	}
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
	r := &rig{loop: l, svc: svc, store: st, dir: o.dir, written: make(chan sweeps.Info, 64),
		svcDone: make(chan error, 1), runDone: make(chan error, 1)}
	l.Clock.OnSleep(func() {
		r.note(l)
		if o.onSleep != nil {
			o.onSleep()
		}
	})
	sweeps.SetHooks(st, o.onEvent, func(i sweeps.Info) { r.written <- i })
	r.capture = svc.Subscribe(1 << 20)
	r.sub = svc.Subscribe(o.depth)
	ctx, cancel := context.WithCancel(context.Background())
	r.cancel = cancel
	go func() { r.svcDone <- svc.Run(ctx) }()
	go func() { r.runDone <- st.Run(context.Background(), r.sub) }()
	t.Cleanup(func() { r.stop(t) })
	return r
}

// note keeps the motor's position if it changed; on the service's goroutine.
func (r *rig) note(l *fakeloop.Loop) {
	m, now := l.Drive.Motor(), l.Clock.Now()
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
func (r *rig) stop(t *testing.T) {
	t.Helper()
	r.stopOnce.Do(func() {
		r.cancel()
		select {
		case err := <-r.svcDone:
			if err != nil {
				t.Errorf("service Run: %v", err)
			}
		case <-time.After(safety):
			t.Fatal("the service's Run did not return")
		}
		r.sub.Close()
		r.capture.Close()
		select {
		case err := <-r.runDone:
			if err != nil {
				t.Errorf("store Run: %v", err)
			}
		case <-time.After(safety):
			t.Fatal("the store's Run did not return")
		}
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

// run submits q and waits for its result.
func (r *rig) run(t *testing.T, q controller.Request) (controller.RequestStatus, tune.Result) {
	t.Helper()
	if q.Source == "" {
		q.Source = controller.SourceAPI
	}
	id, err := r.svc.Submit(q)
	if err != nil {
		t.Fatalf("submit %+v: %v", q, err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), safety)
	defer cancel()
	st, err := r.svc.Wait(ctx, id)
	if err != nil {
		t.Fatalf("wait for request %d: %v", id, err)
	}
	if st.Result == nil {
		t.Fatalf("%s request %d ended %s without a result", q.Kind, id, st.State)
	}
	return st, *st.Result
}

// tune tunes at f with the radio there; it must succeed.
func (r *rig) tune(t *testing.T, f physic.Frequency) controller.RequestStatus {
	t.Helper()
	r.loop.Radio.SetFrequency(f)
	st, res := r.run(t, controller.Request{Kind: controller.Tune, Freq: f})
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
	case <-time.After(safety):
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
