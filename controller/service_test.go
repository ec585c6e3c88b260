package controller_test

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/bench"
)

// outcome is a result and the hardware's state when it was reported.
type outcome struct {
	tune.Result
	moving, keyed bool
}

// newService builds a service on the demo station, with the given observer and a channel
// that receives every result.
func newService(t *testing.T, o controller.Options) (*controller.Service, *bench.Rig, chan outcome) {
	t.Helper()
	r, err := bench.NewRig(bench.RigOptions{Truth: sim.DefaultSpec()})
	if err != nil {
		t.Fatal(err)
	}
	results := make(chan outcome, 16)
	o.OnResult = func(res tune.Result) {
		results <- outcome{res, r.Axis.Snapshot().Moving, r.Station.Radio.Transmitting()}
	}
	d := tune.Deps{Axis: r.Axis, Sensor: r.Station.Sensor(), Clock: r.Clock, Map: r.Map,
		Transmitter: r.Station.Radio, Thermometer: r.Station.Thermometer()}
	s, err := controller.NewService(d, tune.Options{Transmit: true, NominalBacklash: 64}, o)
	if err != nil {
		t.Fatal(err)
	}
	return s, r, results
}

// next waits for the service's next result; the timeout is only a safety net for a broken
// service (the virtual clock makes every operation take microseconds of real time).
func next(t *testing.T, results chan outcome) outcome {
	t.Helper()
	select {
	case res := <-results:
		return res
	case <-time.After(30 * time.Second):
		t.Fatal("no result from the service")
		return outcome{}
	}
}

func start(t *testing.T, s *controller.Service) (stop func()) {
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Run(ctx) }()
	return func() {
		cancel()
		if err := <-done; err != nil {
			t.Errorf("Run: %v", err)
		}
	}
}

func TestNewFrequencyCancelsRunningTune(t *testing.T) {
	var s *controller.Service
	var r *bench.Rig
	f1, f2 := 3750*physic.KiloHertz, 3700*physic.KiloHertz
	submitted := false
	// The operator turns the VFO while the first tune is sweeping through the dip.
	obs := tune.ObserverFunc(func(e tune.Event) {
		if e.Kind == tune.KindState && e.State == tune.Refining && e.Freq == f1 && !submitted {
			submitted = true
			if err := r.Station.Radio.SetFrequency(f2); err != nil {
				t.Error(err)
			}
			if err := s.Submit(controller.Request{Kind: controller.Tune, Freq: f2}); err != nil {
				t.Error(err)
			}
		}
	})
	var results chan outcome
	s, r, results = newService(t, controller.Options{Observer: obs})
	stop := start(t, s)
	defer stop()
	if err := r.Station.Radio.SetFrequency(f1); err != nil {
		t.Fatal(err)
	}
	if err := s.Submit(controller.Request{Kind: controller.Tune, Freq: f1}); err != nil {
		t.Fatal(err)
	}
	first := next(t, results)
	if first.Outcome != tune.Aborted || first.Freq != f1 {
		t.Fatalf("first result %s at %v, want aborted at %v", first.Outcome, first.Freq, f1)
	}
	if first.moving || first.keyed {
		t.Fatal("an aborted tune left the motor running or the carrier on")
	}
	second := next(t, results)
	if second.Outcome != tune.Tuned || second.Freq != f2 {
		t.Fatalf("second result %s at %v (%v), want tuned at %v", second.Outcome, second.Freq, second.Err, f2)
	}
	snap := s.Snapshot()
	if snap.Last == nil || snap.Last.Freq != f2 || snap.Busy || snap.State != tune.Idle || snap.MapPoints != 1 {
		t.Fatalf("snapshot after the tune: %+v", snap)
	}
}

func TestFollowPrepositionsWithoutRF(t *testing.T) {
	s, r, results := newService(t, controller.Options{})
	stop := start(t, s)
	defer stop()
	f := 3750 * physic.KiloHertz
	if err := s.Submit(controller.Request{Kind: controller.Follow, Freq: f}); err != nil {
		t.Fatal(err)
	}
	res := next(t, results)
	if res.Outcome != tune.Positioned || res.RFTime != 0 || r.Station.Coupler.Reads() != 0 {
		t.Fatalf("follow: %s, RF %v, %d coupler reads; want positioned with no RF at all", res.Outcome, res.RFTime, r.Station.Coupler.Reads())
	}
}

func TestServicePersistsAndShutsDown(t *testing.T) {
	dir := t.TempDir()
	mapPath, calPath := filepath.Join(dir, "loop.map"), filepath.Join(dir, "backlash")
	s, r, results := newService(t, controller.Options{MapPath: mapPath, CalibrationPath: calPath})
	stop := start(t, s)
	f := 3750 * physic.KiloHertz
	if err := r.Station.Radio.SetFrequency(f); err != nil {
		t.Fatal(err)
	}
	if err := s.Submit(controller.Request{Kind: controller.Calibrate, Freq: f}); err != nil {
		t.Fatal(err)
	}
	res := next(t, results)
	if res.Outcome != tune.Calibrated {
		t.Fatalf("calibrate: %s (%v)", res.Outcome, res.Err)
	}
	// What was learned is on disk at once, not only at shutdown.
	m, err := memmap.Load(mapPath, memmap.Options{})
	if err != nil || m.Len() != 1 {
		t.Fatalf("map on disk after the calibration: %v points, %v", m, err)
	}
	c, err := tune.LoadCalibration(calPath)
	if err != nil || c.Backlash != res.Backlash || c.Freq != f {
		t.Fatalf("calibration on disk: %+v, %v; want backlash %d at %v", c, err, res.Backlash, f)
	}
	stop()
	if st := r.Axis.Snapshot(); st.Enabled || st.Moving {
		t.Fatalf("after shutdown the axis is %+v, want halted", st)
	}
}

func TestSubmitRejectsBadRequests(t *testing.T) {
	s, _, _ := newService(t, controller.Options{})
	for _, r := range []controller.Request{{Kind: controller.Tune}, {Kind: "dance"}, {Kind: controller.Follow, Freq: -1}} {
		if err := s.Submit(r); err == nil {
			t.Errorf("accepted %+v", r)
		}
	}
	if err := s.Submit(controller.Request{Kind: controller.Stop}); err != nil {
		t.Errorf("stop: %v", err)
	}
	if p := s.Snapshot().Pending; p != nil {
		t.Errorf("a stop left %+v pending", p)
	}
}

// A panic anywhere in an operation (here in an observer, in the middle of the fine sweep, with
// the carrier on) does not take the service down: the carrier is dropped, the motor stopped, a
// fault latched and shown in the snapshot, every request refused until a reset, and after the
// reset the service tunes again. A panic in the code that runs after an operation (here the
// result callback) is latched the same way.
func TestServiceSurvivesPanics(t *testing.T) {
	f := 3750 * physic.KiloHertz
	panicAt := tune.Refining
	obs := tune.ObserverFunc(func(e tune.Event) {
		if e.Kind == tune.KindState && e.State == panicAt {
			panicAt = ""
			panic("injected: an observer bug")
		}
	})
	s, r, results := newService(t, controller.Options{Observer: obs})
	stop := start(t, s)
	defer stop()
	if err := r.Station.Radio.SetFrequency(f); err != nil {
		t.Fatal(err)
	}
	submit := func(k controller.Kind) outcome {
		t.Helper()
		if err := s.Submit(controller.Request{Kind: k, Freq: f}); err != nil {
			t.Fatal(err)
		}
		return next(t, results)
	}
	res := submit(controller.Tune)
	if res.Outcome != tune.Fault || !errors.Is(res.Err, tune.ErrInternal) {
		t.Fatalf("the panicking tune: %s (%v), want a fault", res.Outcome, res.Err)
	}
	if res.moving || res.keyed {
		t.Fatal("the panic left the motor running or the carrier on")
	}
	if snap := s.Snapshot(); snap.Fault == "" || snap.State != tune.Faulted {
		t.Fatalf("snapshot after the panic: fault %q, state %s", snap.Fault, snap.State)
	}
	if res := submit(controller.Tune); res.Outcome != tune.Fault || r.Station.Radio.Transmitting() {
		t.Fatalf("a tune with the fault latched: %s", res.Outcome)
	}
	if res := submit(controller.Reset); res.Outcome != tune.Reset {
		t.Fatalf("reset: %s (%v)", res.Outcome, res.Err)
	}
	if res := submit(controller.Tune); res.Outcome != tune.Tuned {
		t.Fatalf("after the reset: %s (%v)", res.Outcome, res.Err)
	}
	if snap := s.Snapshot(); snap.Fault != "" {
		t.Fatalf("fault %q still shown after the reset", snap.Fault)
	}
}

func TestServiceSurvivesAPanicAfterAnOperation(t *testing.T) {
	f := 3750 * physic.KiloHertz
	done := make(chan tune.Result, 4)
	first := true
	r, err := bench.NewRig(bench.RigOptions{Truth: sim.DefaultSpec()})
	if err != nil {
		t.Fatal(err)
	}
	s2, err := controller.NewService(tune.Deps{Axis: r.Axis, Sensor: r.Station.Sensor(), Clock: r.Clock, Map: r.Map,
		Transmitter: r.Station.Radio}, tune.Options{Transmit: true, NominalBacklash: 64},
		controller.Options{OnResult: func(res tune.Result) {
			done <- res
			if first {
				first = false
				panic("injected: a bug after the operation")
			}
		}})
	if err != nil {
		t.Fatal(err)
	}
	stop := start(t, s2)
	defer stop()
	if err := r.Station.Radio.SetFrequency(f); err != nil {
		t.Fatal(err)
	}
	if err := s2.Submit(controller.Request{Kind: controller.Tune, Freq: f}); err != nil {
		t.Fatal(err)
	}
	<-done
	if err := s2.Submit(controller.Request{Kind: controller.Tune, Freq: f}); err != nil {
		t.Fatal(err)
	}
	if res := <-done; res.Outcome != tune.Fault {
		t.Fatalf("after a panic outside the operation: %s, want the fault latched", res.Outcome)
	}
	if s2.Snapshot().Fault == "" {
		t.Fatal("no fault shown")
	}
}
