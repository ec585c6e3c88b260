package controller_test

import (
	"errors"
	"testing"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/tune"
)

// The operator turns the VFO while the first tune is sweeping through the dip, and a tune at
// the new frequency is asked for: the first ends aborted with the carrier off and the motor at
// rest, the second tunes.
func TestNewFrequencyCancelsRunningTune(t *testing.T) {
	r := newRig(t, rigOptions{})
	f1, f2 := f80, f80b
	var second controller.RequestID
	r.Loop.Sensor.OnRead(fakeservice.Until(func() bool {
		sn := r.Service.Snapshot()
		if sn.State != tune.Refining || sn.Freq != f1 {
			return false
		}
		r.Loop.Radio.SetFrequency(f2)
		second = r.Submit(t, controller.Request{Kind: controller.Tune, Freq: f2})
		return true
	}))
	r.Start(t)
	r.Loop.Radio.SetFrequency(f1)
	first := r.Wait(t, r.Submit(t, controller.Request{Kind: controller.Tune, Freq: f1}))
	if first.Result == nil || first.Result.Outcome != tune.Aborted || first.Result.Freq != f1 {
		t.Fatalf("first request %s with %+v, want aborted at %v", first.State, first.Result, f1)
	}
	if first.State != controller.RequestCancelled || first.By != second {
		t.Fatalf("first request %s by %d, want cancelled by %d", first.State, first.By, second)
	}
	if h := r.hardware(first.ID); h.moving || h.keyed {
		t.Fatal("an aborted tune left the motor running or the carrier on")
	}
	st := r.Wait(t, second)
	if st.Result == nil || st.Result.Outcome != tune.Tuned || st.Result.Freq != f2 {
		t.Fatalf("second request: %+v, want tuned at %v", st.Result, f2)
	}
	snap := r.Service.Snapshot()
	if snap.Last == nil || snap.Last.Freq != f2 || snap.Busy || snap.State != tune.Idle || snap.MapPoints != 1 || snap.LastRequest != second {
		t.Fatalf("snapshot after the tune: %+v", snap)
	}
}

func TestFollowPrepositionsWithoutRF(t *testing.T) {
	r := newRig(t, rigOptions{})
	r.Start(t)
	_, res := r.Do(t, controller.Request{Kind: controller.Follow, Freq: f80})
	if res.Outcome != tune.Positioned || res.RFTime != 0 || r.Loop.Sensor.Reads() != 0 || r.Loop.Radio.Keys() != 0 {
		t.Fatalf("follow: %s, RF %v, %d coupler reads, %d keys; want positioned with no RF at all",
			res.Outcome, res.RFTime, r.Loop.Sensor.Reads(), r.Loop.Radio.Keys())
	}
}

// What a calibration learns is on disk as soon as the request is done, not only at shutdown;
// on the way out the axis is halted and the clean stop is there for the daemon to record.
func TestServicePersistsAndShutsDown(t *testing.T) {
	dir := openDir(t, t.TempDir())
	r := newRig(t, rigOptions{svc: controller.Options{State: loadState(t, dir)}})
	stop := r.Start(t)
	if _, ok := r.Service.CleanStop(); ok {
		t.Fatal("a clean stop before Run has returned")
	}
	_, res := r.Do(t, controller.Request{Kind: controller.Calibrate, Freq: f80})
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
	case <-r.Service.Done():
	default:
		t.Fatal("Done not closed after Run returned")
	}
	if a := r.Axis.Snapshot(); a.Enabled || a.Moving {
		t.Fatalf("after shutdown the axis is %+v, want halted", a)
	}
	mk, ok := r.Service.CleanStop()
	if !ok || mk.Position != r.Axis.Position() || !mk.Trusted {
		t.Fatalf("clean stop %+v (ok %v), want the trusted position %d", mk, ok, r.Axis.Position())
	}
	if _, err := r.Service.Submit(controller.Request{Kind: controller.Preposition, Freq: f80, Source: controller.SourceAPI}); !errors.Is(err, controller.ErrStopped) {
		t.Fatalf("submit after Run returned: %v, want ErrStopped", err)
	}
}

func TestSubmitRejectsBadRequests(t *testing.T) {
	r := newRig(t, rigOptions{})
	lo, hi := r.Axis.SoftLimits()
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
		if id, err := r.Service.Submit(q); err == nil {
			t.Errorf("accepted %+v as request %d", q, id)
		}
	}
	r.Submit(t, controller.Request{Kind: controller.Goto, Step: (lo + hi) / 2})
	if id, err := r.Service.Submit(controller.Request{Kind: controller.Stop, Source: controller.SourceOperator}); err != nil || id == 0 {
		t.Errorf("stop: %d, %v", id, err)
	}
	if q := r.Service.Snapshot().Queue; len(q) != 0 {
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
	r.Loop.Sensor.OnRead(func() {
		if armed && r.Service.Snapshot().State == tune.Refining {
			armed = false
			panic("injected: a driver bug")
		}
	})
	r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	st, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80})
	if res.Outcome != tune.Fault || !errors.Is(res.Err, tune.ErrInternal) {
		t.Fatalf("the panicking tune: %s (%v), want a fault", res.Outcome, res.Err)
	}
	if h := r.hardware(st.ID); h.moving || h.keyed {
		t.Fatal("the panic left the motor running or the carrier on")
	}
	if snap := r.Service.Snapshot(); snap.Fault == "" || snap.State != tune.Faulted {
		t.Fatalf("snapshot after the panic: fault %q, state %s", snap.Fault, snap.State)
	}
	if _, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Fault || r.Loop.Radio.Transmitting() {
		t.Fatalf("a tune with the fault latched: %s", res.Outcome)
	}
	if _, res := r.Do(t, controller.Request{Kind: controller.Reset}); res.Outcome != tune.Reset {
		t.Fatalf("reset: %s (%v)", res.Outcome, res.Err)
	}
	if _, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Tuned {
		t.Fatalf("after the reset: %s (%v)", res.Outcome, res.Err)
	}
	if snap := r.Service.Snapshot(); snap.Fault != "" {
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
	r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	if _, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Tuned {
		t.Fatalf("the first tune: %s (%v)", res.Outcome, res.Err)
	}
	if _, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Fault {
		t.Fatalf("after a panic outside the operation: %s, want the fault latched", res.Outcome)
	}
	if r.Service.Snapshot().Fault == "" {
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
	_, err = controller.NewService(tune.Deps{Axis: r.Axis, Sensor: r.Loop.Sensor, Clock: r.Loop.Clock, Map: m,
		Observer: tune.ObserverFunc(func(tune.Event) {})}, tune.Options{}, controller.Options{})
	if err == nil {
		t.Fatal("a service built with an observer of the caller's")
	}
}

// Goto moves to a step with no RF; Reference declares where the motor is; both are refused
// where they must be.
func TestGotoAndReference(t *testing.T) {
	r := newRig(t, rigOptions{})
	r.Start(t)
	st, res := r.Do(t, controller.Request{Kind: controller.Goto, Step: 30000})
	if res.Outcome != tune.Positioned || r.Axis.Position() != 30000 || res.Pos != 30000 || r.Loop.Radio.Keys() != 0 {
		t.Fatalf("goto 30000: %s at %d (axis %d), %d keys", res.Outcome, res.Pos, r.Axis.Position(), r.Loop.Radio.Keys())
	}
	// The approach ends moving up with the play taken up: the shaft trails the motor by half
	// the fake's 40-step play.
	if sh := r.Loop.Drive.Shaft(); sh != 30000-20 {
		t.Fatalf("goto %d left the shaft at %.1f, want 29980 (approached from below)", st.Request.Step, sh)
	}
	_, res = r.Do(t, controller.Request{Kind: controller.Reference, Step: 12345})
	if res.Outcome != tune.Referenced || r.Axis.Position() != 12345 || !r.Axis.Trusted() {
		t.Fatalf("reference 12345: %s, axis at %d (trusted %v)", res.Outcome, r.Axis.Position(), r.Axis.Trusted())
	}
	r.Axis.Distrust("test: the position is lost")
	if _, res := r.Do(t, controller.Request{Kind: controller.Goto, Step: 20000}); res.Outcome != tune.NeedsReference {
		t.Fatalf("goto with the position lost: %s (%v), want needs-reference", res.Outcome, res.Err)
	}
}
