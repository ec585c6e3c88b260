package controller_test

import (
	"errors"
	"testing"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/tune"
)

// The operator turns the VFO while the first tune is sweeping through the dip, and a tune at
// the new frequency is asked for: the first ends aborted with the carrier off and the motor at
// rest, the second tunes.
func TestNewFrequencyCancelsRunningTune(t *testing.T) {
	r := newRig(t, rigOptions{})
	f1, f2 := f80, f80b
	var second controller.RequestID
	r.loop.Sensor.OnRead(until(func() bool {
		sn := r.s.Snapshot()
		if sn.State != tune.Refining || sn.Freq != f1 {
			return false
		}
		r.loop.Radio.SetFrequency(f2)
		second = r.submit(t, controller.Request{Kind: controller.Tune, Freq: f2})
		return true
	}))
	r.start(t)
	r.loop.Radio.SetFrequency(f1)
	first := r.wait(t, r.submit(t, controller.Request{Kind: controller.Tune, Freq: f1}))
	if first.Result == nil || first.Result.Outcome != tune.Aborted || first.Result.Freq != f1 {
		t.Fatalf("first request %s with %+v, want aborted at %v", first.State, first.Result, f1)
	}
	if first.State != controller.RequestCancelled || first.By != second {
		t.Fatalf("first request %s by %d, want cancelled by %d", first.State, first.By, second)
	}
	if h := r.hardware(first.ID); h.moving || h.keyed {
		t.Fatal("an aborted tune left the motor running or the carrier on")
	}
	st := r.wait(t, second)
	if st.Result == nil || st.Result.Outcome != tune.Tuned || st.Result.Freq != f2 {
		t.Fatalf("second request: %+v, want tuned at %v", st.Result, f2)
	}
	snap := r.s.Snapshot()
	if snap.Last == nil || snap.Last.Freq != f2 || snap.Busy || snap.State != tune.Idle || snap.MapPoints != 1 || snap.LastRequest != second {
		t.Fatalf("snapshot after the tune: %+v", snap)
	}
}

func TestFollowPrepositionsWithoutRF(t *testing.T) {
	r := newRig(t, rigOptions{})
	r.start(t)
	_, res := r.run(t, controller.Request{Kind: controller.Follow, Freq: f80})
	if res.Outcome != tune.Positioned || res.RFTime != 0 || r.loop.Sensor.Reads() != 0 || r.loop.Radio.Keys() != 0 {
		t.Fatalf("follow: %s, RF %v, %d coupler reads, %d keys; want positioned with no RF at all",
			res.Outcome, res.RFTime, r.loop.Sensor.Reads(), r.loop.Radio.Keys())
	}
}

// What a calibration learns is on disk as soon as the request is done, not only at shutdown;
// on the way out the axis is halted and the clean stop is there for the daemon to record.
func TestServicePersistsAndShutsDown(t *testing.T) {
	dir, err := statedir.Open(t.TempDir(), statedir.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer dir.Close()
	l, err := fakeloop.New(fakeloop.Options{})
	if err != nil {
		t.Fatal(err)
	}
	st, err := controller.LoadState(dir, controller.StateOptions{Map: memmap.Options{Prior: l.Prior}, Clock: l.Clock})
	if err != nil {
		t.Fatal(err)
	}
	r := newRig(t, rigOptions{svc: controller.Options{State: st}})
	stop := r.start(t)
	if _, ok := r.s.CleanStop(); ok {
		t.Fatal("a clean stop before Run has returned")
	}
	_, res := r.run(t, controller.Request{Kind: controller.Calibrate, Freq: f80})
	if res.Outcome != tune.Calibrated {
		t.Fatalf("calibrate: %s (%v)", res.Outcome, res.Err)
	}
	m, err := memmap.Load(dir.MapPath(), memmap.Options{})
	if err != nil || m.Len() != 1 {
		t.Fatalf("map on disk after the calibration: %v points, %v", m, err)
	}
	c, err := tune.LoadCalibration(dir.CalibrationPath())
	if err != nil || c.Backlash != res.Backlash || c.Freq != f80 {
		t.Fatalf("calibration on disk: %+v, %v; want backlash %d at %v", c, err, res.Backlash, f80)
	}
	stop()
	select {
	case <-r.s.Done():
	default:
		t.Fatal("Done not closed after Run returned")
	}
	if a := r.ax.Snapshot(); a.Enabled || a.Moving {
		t.Fatalf("after shutdown the axis is %+v, want halted", a)
	}
	mk, ok := r.s.CleanStop()
	if !ok || mk.Position != r.ax.Position() || !mk.Trusted {
		t.Fatalf("clean stop %+v (ok %v), want the trusted position %d", mk, ok, r.ax.Position())
	}
	if _, err := r.s.Submit(controller.Request{Kind: controller.Preposition, Freq: f80, Source: controller.SourceAPI}); !errors.Is(err, controller.ErrStopped) {
		t.Fatalf("submit after Run returned: %v, want ErrStopped", err)
	}
}

func TestSubmitRejectsBadRequests(t *testing.T) {
	r := newRig(t, rigOptions{})
	lo, hi := r.ax.SoftLimits()
	for _, q := range []controller.Request{
		{Kind: controller.Tune, Source: controller.SourceAPI},
		{Kind: "dance", Source: controller.SourceAPI},
		{Kind: controller.Follow, Freq: -1, Source: controller.SourceRadio},
		{Kind: controller.Follow, Freq: f80},                                // no source
		{Kind: controller.Follow, Freq: f80, Source: "neighbour"},           // no such source
		{Kind: controller.Goto, Step: lo - 1, Source: controller.SourceAPI}, // outside the soft limits
		{Kind: controller.Goto, Step: hi + 1, Source: controller.SourceAPI},
		{Kind: controller.Home, Source: controller.SourceAPI}, // the rig's loop has no home switch
	} {
		if id, err := r.s.Submit(q); err == nil {
			t.Errorf("accepted %+v as request %d", q, id)
		}
	}
	r.submit(t, controller.Request{Kind: controller.Goto, Step: (lo + hi) / 2})
	if id, err := r.s.Submit(controller.Request{Kind: controller.Stop, Source: controller.SourceOperator}); err != nil || id == 0 {
		t.Errorf("stop: %d, %v", id, err)
	}
	if q := r.s.Snapshot().Queue; len(q) != 0 {
		t.Errorf("a stop left %+v waiting", q)
	}
}

// A panic anywhere in an operation (here in the coupler's driver, in the middle of the fine
// sweep, with the carrier on) does not take the service down: the carrier is dropped, the motor
// stopped, a fault latched and shown in the snapshot, every request refused until a reset, and
// after the reset the service tunes again.
func TestServiceSurvivesPanics(t *testing.T) {
	r := newRig(t, rigOptions{})
	armed := true
	r.loop.Sensor.OnRead(func() {
		if armed && r.s.Snapshot().State == tune.Refining {
			armed = false
			panic("injected: a driver bug")
		}
	})
	r.start(t)
	r.loop.Radio.SetFrequency(f80)
	st, res := r.run(t, controller.Request{Kind: controller.Tune, Freq: f80})
	if res.Outcome != tune.Fault || !errors.Is(res.Err, tune.ErrInternal) {
		t.Fatalf("the panicking tune: %s (%v), want a fault", res.Outcome, res.Err)
	}
	if h := r.hardware(st.ID); h.moving || h.keyed {
		t.Fatal("the panic left the motor running or the carrier on")
	}
	if snap := r.s.Snapshot(); snap.Fault == "" || snap.State != tune.Faulted {
		t.Fatalf("snapshot after the panic: fault %q, state %s", snap.Fault, snap.State)
	}
	if _, res := r.run(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Fault || r.loop.Radio.Transmitting() {
		t.Fatalf("a tune with the fault latched: %s", res.Outcome)
	}
	if _, res := r.run(t, controller.Request{Kind: controller.Reset}); res.Outcome != tune.Reset {
		t.Fatalf("reset: %s (%v)", res.Outcome, res.Err)
	}
	if _, res := r.run(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Tuned {
		t.Fatalf("after the reset: %s (%v)", res.Outcome, res.Err)
	}
	if snap := r.s.Snapshot(); snap.Fault != "" {
		t.Fatalf("fault %q still shown after the reset", snap.Fault)
	}
}

// A panic in the code that runs after an operation (here the daemon's hook) is latched the same
// way: the next operation is refused as a fault, and the snapshot shows it.
func TestServiceSurvivesAPanicAfterAnOperation(t *testing.T) {
	first := true
	r := newRig(t, rigOptions{svc: controller.Options{AfterOperation: func(controller.RequestStatus) {
		if first {
			first = false
			panic("injected: a bug after the operation")
		}
	}}})
	r.start(t)
	r.loop.Radio.SetFrequency(f80)
	if _, res := r.run(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Tuned {
		t.Fatalf("the first tune: %s (%v)", res.Outcome, res.Err)
	}
	if _, res := r.run(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Fault {
		t.Fatalf("after a panic outside the operation: %s, want the fault latched", res.Outcome)
	}
	if r.s.Snapshot().Fault == "" {
		t.Fatal("no fault shown")
	}
}

// The service's tuner observer is its own: listeners subscribe.
func TestNewServiceRefusesAnObserver(t *testing.T) {
	r := newRig(t, rigOptions{})
	m, err := memmap.New(memmap.Options{})
	if err != nil {
		t.Fatal(err)
	}
	_, err = controller.NewService(tune.Deps{Axis: r.ax, Sensor: r.loop.Sensor, Clock: r.loop.Clock, Map: m,
		Observer: tune.ObserverFunc(func(tune.Event) {})}, tune.Options{}, controller.Options{})
	if err == nil {
		t.Fatal("a service built with an observer of the caller's")
	}
}

// Goto moves to a step with no RF; Reference declares where the motor is; both are refused
// where they must be.
func TestGotoAndReference(t *testing.T) {
	r := newRig(t, rigOptions{})
	r.start(t)
	st, res := r.run(t, controller.Request{Kind: controller.Goto, Step: 30000})
	if res.Outcome != tune.Positioned || r.ax.Position() != 30000 || res.Pos != 30000 || r.loop.Radio.Keys() != 0 {
		t.Fatalf("goto 30000: %s at %d (axis %d), %d keys", res.Outcome, res.Pos, r.ax.Position(), r.loop.Radio.Keys())
	}
	// The approach ends moving up with the play taken up: the shaft trails the motor by half
	// the fake's 40-step play.
	if sh := r.loop.Drive.Shaft(); sh != 30000-20 {
		t.Fatalf("goto %d left the shaft at %.1f, want 29980 (approached from below)", st.Request.Step, sh)
	}
	_, res = r.run(t, controller.Request{Kind: controller.Reference, Step: 12345})
	if res.Outcome != tune.Referenced || r.ax.Position() != 12345 || !r.ax.Trusted() {
		t.Fatalf("reference 12345: %s, axis at %d (trusted %v)", res.Outcome, r.ax.Position(), r.ax.Trusted())
	}
	r.ax.Distrust("test: the position is lost")
	if _, res := r.run(t, controller.Request{Kind: controller.Goto, Step: 20000}); res.Outcome != tune.NeedsReference {
		t.Fatalf("goto with the position lost: %s (%v), want needs-reference", res.Outcome, res.Err)
	}
}
