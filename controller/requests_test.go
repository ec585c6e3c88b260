package controller_test

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/tune"
)

// busy is the state a running request of each kind is surely in when another arrives in the
// tests: the carrier on for the RF ones, the motor moving for the others.
var busy = map[controller.Kind]tune.State{
	controller.Follow:      tune.Refining, // with AutoTune
	controller.Preposition: tune.Positioning,
	controller.Tune:        tune.Refining,
	controller.Calibrate:   tune.Calibrating,
	controller.Goto:        tune.Positioning,
	controller.Home:        tune.Homing,
}

// arrival is the request of each kind that arrives in the tests, and what it must do to the
// radio first (an operator turning the VFO to the new frequency).
func arrival(k controller.Kind) controller.Request {
	q := controller.Request{Kind: k, Source: controller.SourceOperator}
	switch k {
	case controller.Follow, controller.Preposition, controller.Tune, controller.Calibrate:
		q.Freq = f80b
	case controller.Goto:
		q.Step = 30000
	case controller.Reference:
		q.Step = 20000
	}
	return q
}

// success is each kind's outcome when it runs to its end undisturbed on the fake loop.
var success = map[controller.Kind]tune.Outcome{
	controller.Follow:      tune.Tuned,
	controller.Preposition: tune.Positioned,
	controller.Tune:        tune.Tuned,
	controller.Calibrate:   tune.Calibrated,
	controller.Goto:        tune.Positioned,
	controller.Home:        tune.Homed,
}

// Every cell of the cancellation table, against the running service: a request of each kind
// arrives while one of each kind that takes time runs (in its busiest state); the running one is
// cancelled (aborted, carrier off, motor at rest) exactly where Cancels says, and otherwise runs
// to its end before the newcomer starts.
func TestCancellationTable(t *testing.T) {
	for _, rk := range []controller.Kind{controller.Follow, controller.Preposition, controller.Tune, controller.Calibrate, controller.Goto, controller.Home} {
		for _, ak := range controller.Kinds() {
			t.Run(fmt.Sprintf("%s while %s", ak, rk), func(t *testing.T) {
				r := newRig(t, rigOptions{loop: fakeloop.Options{HomeSwitch: true}, svc: controller.Options{AutoTune: true}})
				var running, arrived controller.RequestID
				r.Loop.Clock.OnSleep(fakeservice.Until(func() bool {
					sn := r.Service.Snapshot()
					if running == 0 || sn.Request != running || sn.State != busy[rk] {
						return false
					}
					q := arrival(ak)
					if q.Freq > 0 {
						r.Loop.Radio.SetFrequency(q.Freq)
					}
					arrived = r.Submit(t, q)
					return true
				}))
				r.Loop.Radio.SetFrequency(f80)
				q := controller.Request{Kind: rk, Source: controller.SourceAPI, Freq: f80, Step: 40000}
				if rk == controller.Goto || rk == controller.Home {
					q.Freq = 0
				}
				running = r.Submit(t, q) // before Run starts: the hook reads it
				r.Start(t)
				st := r.Wait(t, running)
				if arrived == 0 {
					t.Fatalf("the %s request never reached %s (ended %s: %+v)", rk, busy[rk], st.State, st.Result)
				}
				if st.Result == nil {
					t.Fatalf("the running request ended %s without a result", st.State)
				}
				if h := r.hardware(running); h.moving || h.keyed {
					t.Fatalf("the %s request ended with the motor moving (%v) or the carrier on (%v)", rk, h.moving, h.keyed)
				}
				a := r.Wait(t, arrived)
				if controller.Cancels(ak, rk) {
					if st.State != controller.RequestCancelled || st.By != arrived || st.Result.Outcome != tune.Aborted {
						t.Fatalf("the %s request: %s by %d, %s; want cancelled by %d, aborted", rk, st.State, st.By, st.Result.Outcome, arrived)
					}
				} else {
					if st.State != controller.RequestDone || st.Result.Outcome != success[rk] {
						t.Fatalf("the %s request: %s, %s (%v); want done, %s", rk, st.State, st.Result.Outcome, st.Result.Err, success[rk])
					}
					if a.Started.Before(st.Finished) {
						t.Fatalf("the %s request started at %v, before the %s it waited for ended at %v", ak, a.Started, rk, st.Finished)
					}
				}
				if ak == controller.Stop {
					if a.State != controller.RequestDone || a.Result != nil {
						t.Fatalf("the stop: %s with %+v, want done at once, without a result", a.State, a.Result)
					}
				} else if a.State != controller.RequestDone || a.Result == nil {
					t.Fatalf("the %s request after the %s: %s, want done", ak, rk, a.State)
				}
			})
		}
	}
}

// The table itself, as doc.go shows it.
func TestCancellationTableAsDocumented(t *testing.T) {
	positioning := []controller.Kind{controller.Follow, controller.Preposition, controller.Tune, controller.Calibrate, controller.Goto}
	for _, a := range controller.Kinds() {
		for _, r := range controller.Kinds() {
			var want bool
			switch {
			case a == controller.Stop:
				want = true
			case a == controller.Reset:
				want = false
			default:
				want = slices.Contains(positioning, r)
			}
			if got := controller.Cancels(a, r); got != want {
				t.Errorf("Cancels(%s, %s) = %v, the documented table says %v", a, r, got, want)
			}
			switch {
			case a == controller.Stop:
				want = true
			case slices.Contains(positioning, a):
				want = slices.Contains(positioning, r)
			default:
				want = a == r
			}
			if got := controller.Replaces(a, r); got != want {
				t.Errorf("Replaces(%s, %s) = %v, the documented table says %v", a, r, got, want)
			}
		}
	}
}

// homing runs a homing on a loop with a home switch and calls during with the homing under
// way, on the service's goroutine.
func homing(t *testing.T, o controller.Options, during func(r *rig)) (*rig, controller.RequestStatus) {
	t.Helper()
	r := newRig(t, rigOptions{loop: fakeloop.Options{HomeSwitch: true}, untrusted: true, svc: o})
	var home controller.RequestID
	r.Loop.Clock.OnSleep(fakeservice.Until(func() bool {
		if home == 0 || r.Service.Snapshot().State != tune.Homing {
			return false
		}
		during(r)
		return true
	}))
	home = r.Submit(t, controller.Request{Kind: controller.Home, Source: controller.SourceOperator})
	r.Start(t) // after the submit: the hook reads home
	return r, r.Wait(t, home)
}

// A homing needs no RF: a new frequency that arrives during it waits, and runs after it, from
// the position the homing found.
func TestHomingFinishesBeforeANewFrequency(t *testing.T) {
	var follow controller.RequestID
	r, home := homing(t, controller.Options{}, func(r *rig) {
		follow = r.Submit(t, controller.Request{Kind: controller.Follow, Source: controller.SourceRadio, Freq: f80})
		if q := r.Service.Snapshot().Queue; len(q) != 1 || q[0].ID != follow {
			t.Errorf("queue during the homing: %+v, want the follow", q)
		}
	})
	if home.State != controller.RequestDone || home.Result.Outcome != tune.Homed {
		t.Fatalf("homing: %s, %+v; want done, homed", home.State, home.Result)
	}
	st := r.Wait(t, follow)
	if st.Result == nil || st.Result.Outcome != tune.Positioned || st.Started.Before(home.Finished) {
		t.Fatalf("the follow after the homing: %s, %+v, started %v (homing ended %v)", st.State, st.Result, st.Started, home.Finished)
	}
}

// A stop cancels a homing (the position stays unknown) and clears what waits.
func TestStopCancelsHoming(t *testing.T) {
	var follow, stop controller.RequestID
	r, home := homing(t, controller.Options{}, func(r *rig) {
		follow = r.Submit(t, controller.Request{Kind: controller.Follow, Source: controller.SourceRadio, Freq: f80})
		stop = r.Submit(t, controller.Request{Kind: controller.Stop, Source: controller.SourceOperator})
	})
	if home.State != controller.RequestCancelled || home.By != stop || home.Result.Outcome != tune.Aborted {
		t.Fatalf("homing after a stop: %s by %d, %+v; want cancelled by %d, aborted", home.State, home.By, home.Result, stop)
	}
	if st := r.Wait(t, follow); st.State != controller.RequestCancelled || st.By != stop || st.Result != nil {
		t.Fatalf("the waiting follow after a stop: %s by %d, result %+v; want cancelled by %d, never run", st.State, st.By, st.Result, stop)
	}
	if r.Axis.Trusted() || r.Axis.Snapshot().Moving {
		t.Fatalf("after a stopped homing the axis is %+v, want at rest and untrusted", r.Axis.Snapshot())
	}
}

// A new frequency cancels an RF calibration (its carrier would be on the wrong frequency); the
// new frequency is then followed.
func TestFrequencyCancelsCalibration(t *testing.T) {
	r := newRig(t, rigOptions{svc: controller.Options{AutoTune: true}})
	var follow controller.RequestID
	r.Loop.Sensor.OnRead(fakeservice.Until(func() bool {
		if r.Service.Snapshot().State != tune.Calibrating {
			return false
		}
		r.Loop.Radio.SetFrequency(f80b)
		follow = r.Submit(t, controller.Request{Kind: controller.Follow, Source: controller.SourceRadio, Freq: f80b})
		return true
	}))
	r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	cal := r.Wait(t, r.Submit(t, controller.Request{Kind: controller.Calibrate, Freq: f80, Source: controller.SourceOperator}))
	if cal.State != controller.RequestCancelled || cal.By != follow || cal.Result.Outcome != tune.Aborted {
		t.Fatalf("calibration: %s by %d, %+v; want cancelled by %d", cal.State, cal.By, cal.Result, follow)
	}
	if h := r.hardware(cal.ID); h.keyed || h.moving {
		t.Fatal("the cancelled calibration left the carrier on or the motor moving")
	}
	if st := r.Wait(t, follow); st.Result.Outcome != tune.Tuned || st.Result.Freq != f80b {
		t.Fatalf("the follow after it: %+v", st.Result)
	}
}

// What replaces what among the waiting, and the order they run in, while a homing runs.
func TestQueueRules(t *testing.T) {
	type arrive struct {
		name string
		q    controller.Request
	}
	op := func(k controller.Kind, f physic.Frequency, step int64) controller.Request {
		return controller.Request{Kind: k, Source: controller.SourceAPI, Freq: f, Step: step}
	}
	for _, c := range []struct {
		name     string
		arrivals []arrive
		// the arrivals, by name, that run, in order; the others are replaced
		runs []string
	}{
		{"a newer frequency replaces a waiting one",
			[]arrive{{"f1", op(controller.Follow, f80, 0)}, {"f2", op(controller.Tune, f80b, 0)}}, []string{"f2"}},
		{"a goto replaces a waiting frequency",
			[]arrive{{"f1", op(controller.Preposition, f80, 0)}, {"goto", op(controller.Goto, 0, 30000)}}, []string{"goto"}},
		{"a frequency replaces a waiting goto",
			[]arrive{{"goto", op(controller.Goto, 0, 30000)}, {"f1", op(controller.Calibrate, f80, 0)}}, []string{"f1"}},
		{"a home replaces a waiting home, a frequency queues behind it",
			[]arrive{{"h1", op(controller.Home, 0, 0)}, {"f1", op(controller.Preposition, f80, 0)}, {"h2", op(controller.Home, 0, 0)}}, []string{"f1", "h2"}},
		{"a reset goes first",
			[]arrive{{"f1", op(controller.Preposition, f80, 0)}, {"ref", op(controller.Reference, 0, 20000)}, {"reset", op(controller.Reset, 0, 0)}}, []string{"reset", "f1", "ref"}},
		{"a reset replaces a waiting reset",
			[]arrive{{"r1", op(controller.Reset, 0, 0)}, {"r2", op(controller.Reset, 0, 0)}}, []string{"r2"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			ids := map[string]controller.RequestID{}
			var sub *controller.Subscription
			r, home := homing(t, controller.Options{}, func(r *rig) {
				sub = r.Service.Subscribe(1 << 16)
				for _, a := range c.arrivals {
					ids[a.name] = r.Submit(t, a.q)
				}
			})
			if home.Result.Outcome != tune.Homed {
				t.Fatalf("homing: %+v", home.Result)
			}
			for _, a := range c.arrivals {
				st := r.Wait(t, ids[a.name])
				runs := slices.Contains(c.runs, a.name)
				if runs != (st.State == controller.RequestDone) || !runs && st.State != controller.RequestReplaced {
					t.Errorf("%s: %s (by %d); want it to run: %v", a.name, st.State, st.By, runs)
				}
			}
			var order []string
			for _, e := range fakeservice.Drain(sub) {
				if e.Kind != controller.EventRequest || e.Status.State != controller.RequestRunning {
					continue
				}
				for name, id := range ids {
					if id == e.Request {
						order = append(order, name)
					}
				}
			}
			if !slices.Equal(order, c.runs) {
				t.Fatalf("ran %v, want %v", order, c.runs)
			}
		})
	}
}

// An ID goes from Submit to Request, to the tuner's events and the result, and to Wait.
func TestRequestIDsRoundTrip(t *testing.T) {
	r := newRig(t, rigOptions{svc: controller.Options{History: 16}})
	sub := r.Service.Subscribe(1 << 16)
	r.Loop.Radio.SetFrequency(f80)
	id := r.Submit(t, controller.Request{Kind: controller.Tune, Freq: f80, Source: controller.SourceAPI})
	if st, ok := r.Service.Request(id); !ok || st.ID != id || st.State != controller.RequestQueued || st.Request.Source != controller.SourceAPI {
		t.Fatalf("Request(%d) before Run: %+v, %v", id, st, ok)
	}
	if q := r.Service.Snapshot().Queue; len(q) != 1 || q[0].ID != id {
		t.Fatalf("queue before Run: %+v", q)
	}
	stop := r.Start(t)
	st := r.Wait(t, id)
	if st.State != controller.RequestDone || st.Result == nil || st.Result.Outcome != tune.Tuned || st.Started.IsZero() || st.Finished.Before(st.Started) {
		t.Fatalf("Wait(%d): %+v", id, st)
	}
	if got, _ := r.Service.Request(id); got.Result != st.Result {
		t.Fatalf("Request(%d) and Wait disagree: %+v, %+v", id, got, st)
	}
	var result, final bool
	for _, e := range fakeservice.Drain(sub) {
		switch {
		case e.Kind == controller.EventTune && e.Tune.Kind == tune.KindResult:
			result = e.Request == id && e.Tune.Result.Outcome == tune.Tuned
		case e.Kind == controller.EventRequest && e.Status.State.Final():
			final = e.Request == id && e.Status.ID == id && e.Status.Result.Pos == st.Result.Pos
		}
	}
	if !result || !final {
		t.Fatalf("the result event carries the request: %v; the final request event: %v", result, final)
	}
	if sn := r.Service.Snapshot(); sn.LastRequest != id || sn.Last.Pos != st.Result.Pos {
		t.Fatalf("snapshot's last request %d at %d, want %d at %d", sn.LastRequest, sn.Last.Pos, id, st.Result.Pos)
	}
	// The history keeps the last 16 (as configured): stops are done at once.
	var last controller.RequestID
	for range 40 {
		last = r.Submit(t, controller.Request{Kind: controller.Stop, Source: controller.SourceOperator})
	}
	if _, ok := r.Service.Request(id); ok {
		t.Fatalf("request %d still remembered after 40 more with a history of 16", id)
	}
	if st, ok := r.Service.Request(last); !ok || st.State != controller.RequestDone {
		t.Fatalf("the latest request: %+v, %v", st, ok)
	}
	if _, err := r.Service.Wait(context.Background(), id); !errors.Is(err, controller.ErrUnknownRequest) {
		t.Fatalf("Wait for a forgotten request: %v, want ErrUnknownRequest", err)
	}
	stop()
}

// Requests still waiting when Run returns are cancelled, and Wait returns for them; the
// operation running then is cancelled too, by no request.
func TestRunCancelsWhatWaits(t *testing.T) {
	r := newRig(t, rigOptions{loop: fakeloop.Options{HomeSwitch: true}, untrusted: true})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var follow controller.RequestID
	r.Loop.Clock.OnSleep(fakeservice.Until(func() bool {
		if r.Service.Snapshot().State != tune.Homing {
			return false
		}
		follow = r.Submit(t, controller.Request{Kind: controller.Follow, Source: controller.SourceRadio, Freq: f80})
		cancel() // the daemon is told to stop
		return true
	}))
	home := r.Submit(t, controller.Request{Kind: controller.Home, Source: controller.SourceOperator})
	errc := make(chan error, 1)
	go func() { errc <- r.Service.Run(ctx) }()
	select {
	case err := <-errc:
		if err != nil {
			t.Fatalf("Run: %v", err)
		}
	case <-time.After(fakeservice.Safety):
		t.Fatal("Run did not return")
	}
	if st := r.Wait(t, home); st.State != controller.RequestCancelled || st.By != 0 || st.Result.Outcome != tune.Aborted {
		t.Fatalf("homing at shutdown: %s by %d, %+v; want cancelled by no request, aborted", st.State, st.By, st.Result)
	}
	if st := r.Wait(t, follow); st.State != controller.RequestCancelled || st.Result != nil || st.By != 0 {
		t.Fatalf("the follow waiting at shutdown: %s by %d, %+v; want cancelled by no request, never run", st.State, st.By, st.Result)
	}
	if sn := r.Service.Snapshot(); !sn.Stopped || len(sn.Queue) != 0 || sn.Busy {
		t.Fatalf("snapshot after Run returned: stopped %v, queue %+v, busy %v", sn.Stopped, sn.Queue, sn.Busy)
	}
}
