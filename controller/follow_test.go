package controller_test

import (
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/tune"
)

// The follower's defaults (FollowOptions): settle 0.5 s and stale after 10 s (both from memory).
const (
	settle     = 500 * time.Millisecond
	staleAfter = 10 * time.Second
)

// follower builds a service on the fake loop and a follower for it, driven by hand (Update,
// Poll) on the virtual clock. The clock only moves while the service works, or when the test
// advances it with the service idle.
func follower(t *testing.T, autoTune bool) (*rig, *controller.Follower) {
	t.Helper()
	r := newRig(t, rigOptions{svc: controller.Options{AutoTune: autoTune}})
	fl, err := controller.NewFollower(r.Service, controller.FollowOptions{Manual: true})
	if err != nil {
		t.Fatal(err)
	}
	r.Start(t)
	return r, fl
}

// submitted waits for the follower's latest request, which must be new since prev, and returns
// it.
func submitted(t *testing.T, r *rig, fl *controller.Follower, prev controller.RequestID) controller.RequestStatus {
	t.Helper()
	id := fl.Status().Submitted
	if id == prev {
		t.Fatalf("the follower submitted nothing (still request %d)", prev)
	}
	return r.Wait(t, id)
}

// idle checks that the follower submitted nothing since prev.
func idle(t *testing.T, fl *controller.Follower, prev controller.RequestID, what string) {
	t.Helper()
	if id := fl.Status().Submitted; id != prev {
		t.Fatalf("%s: the follower submitted request %d", what, id)
	}
}

// tuneAt has the loop tuned at f, as an API client would, and waits for it.
func tuneAt(t *testing.T, r *rig, f physic.Frequency) tune.Result {
	t.Helper()
	r.Loop.Radio.SetFrequency(f)
	_, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f, Source: controller.SourceAPI})
	if res.Outcome != tune.Tuned {
		t.Fatalf("tune at %v: %s (%v)", f, res.Outcome, res.Err)
	}
	return res
}

// Inside the tuned window (a quarter of the fitted bandwidth either side: the default retune
// fraction, from memory) nothing happens; outside it a Follow goes out once the frequency has
// settled.
func TestFollowerInsideTheWindow(t *testing.T) {
	r, fl := follower(t, true)
	res := tuneAt(t, r, f80)
	bw := res.Fit.Bandwidth // the fake loop's: 3.75 MHz / Q 1000 ≈ 3.75 kHz
	inside := f80 + physic.Frequency(0.2*bw)*physic.Hertz
	outside := f80 + physic.Frequency(0.3*bw)*physic.Hertz
	r.Loop.Radio.SetFrequency(inside)
	fl.Update(inside, controller.SourceRadio)
	r.Loop.Clock.Advance(2 * settle)
	fl.Poll()
	idle(t, fl, 0, "inside the window")
	if sn := r.Service.Snapshot(); sn.Busy || len(sn.Queue) != 0 || sn.Radio.Freq != inside || sn.Radio.Source != controller.SourceRadio {
		t.Fatalf("snapshot inside the window: busy %v, queue %v, radio %+v", sn.Busy, sn.Queue, sn.Radio)
	}
	r.Loop.Radio.SetFrequency(outside)
	fl.Update(outside, controller.SourceRadio)
	if due := fl.Status().Due; !due.Equal(r.Loop.Clock.Now().Add(settle)) {
		t.Fatalf("a Follow due at %v, want the settle time from now", due)
	}
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	st := submitted(t, r, fl, 0)
	if st.Request.Kind != controller.Follow || st.Request.Freq != outside || st.Request.Source != controller.SourceRadio || st.Result.Outcome != tune.Tuned {
		t.Fatalf("outside the window: %+v → %+v", st.Request, st.Result)
	}
}

// A burst of changes (a VFO knob turning) gives one Follow, at the last frequency, a settle
// time after the last change.
func TestFollowerSettlesAfterABurst(t *testing.T) {
	r, fl := follower(t, false)
	fl.Update(f80, controller.SourceRadio) // the first report pre-positions at once
	first := submitted(t, r, fl, 0)
	if first.Request.Kind != controller.Preposition || first.Result.Outcome != tune.Positioned {
		t.Fatalf("first report: %+v → %+v", first.Request, first.Result)
	}
	burst := []physic.Frequency{3700 * physic.KiloHertz, 3710 * physic.KiloHertz, 3720 * physic.KiloHertz}
	for i, f := range burst {
		if i > 0 {
			r.Loop.Clock.Advance(200 * time.Millisecond)
			fl.Poll()
		}
		fl.Update(f, controller.SourceRadio)
	}
	r.Loop.Clock.Advance(settle - time.Millisecond)
	fl.Poll()
	idle(t, fl, first.ID, "before the last change has settled")
	r.Loop.Clock.Advance(time.Millisecond)
	fl.Poll()
	st := submitted(t, r, fl, first.ID)
	if st.Request.Kind != controller.Follow || st.Request.Freq != burst[2] || st.Result.Outcome != tune.Positioned {
		t.Fatalf("after the burst: %+v → %+v", st.Request, st.Result)
	}
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	idle(t, fl, st.ID, "once followed")
}

// A change of band pre-positions at once, with no RF and no waiting; the RF tune follows once
// the frequency has settled.
func TestFollowerBandChangeAtOnce(t *testing.T) {
	r, fl := follower(t, true)
	tuneAt(t, r, f80)
	fl.Update(f80, controller.SourceRadio)
	idle(t, fl, 0, "on the tuned frequency")
	r.Loop.Radio.SetFrequency(f40)
	keys := r.Loop.Radio.Keys()
	fl.Update(f40, controller.SourceRadio)
	pre := submitted(t, r, fl, 0)
	if pre.Request.Kind != controller.Preposition || pre.Request.Freq != f40 || pre.Result.Outcome != tune.Positioned || r.Loop.Radio.Keys() != keys {
		t.Fatalf("band change: %+v → %+v, %d keys", pre.Request, pre.Result, r.Loop.Radio.Keys()-keys)
	}
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	st := submitted(t, r, fl, pre.ID)
	if st.Request.Kind != controller.Follow || st.Request.Freq != f40 || st.Result.Outcome != tune.Tuned {
		t.Fatalf("after the band change settled: %+v → %+v", st.Request, st.Result)
	}
}

// Without auto-tune the pre-position is all a band change needs.
func TestFollowerBandChangeWithoutAutoTune(t *testing.T) {
	r, fl := follower(t, false)
	fl.Update(f80, controller.SourceRadio)
	first := submitted(t, r, fl, 0)
	fl.Update(f160, controller.SourceRadio)
	pre := submitted(t, r, fl, first.ID)
	if pre.Request.Kind != controller.Preposition || pre.Request.Freq != f160 {
		t.Fatalf("band change: %+v", pre.Request)
	}
	r.Loop.Clock.Advance(2 * settle)
	fl.Poll()
	idle(t, fl, pre.ID, "after the pre-position, without auto-tune")
}

// A source that says nothing for the stale time is marked stale in the snapshot; a word from it
// clears that.
func TestFollowerMarksASilentSourceStale(t *testing.T) {
	r, fl := follower(t, false)
	fl.Update(f80, controller.SourceRadio)
	submitted(t, r, fl, 0)
	fl.Alive(controller.SourceRadio)
	heard := r.Loop.Clock.Now()
	if next := fl.Poll(); !next.Equal(heard.Add(staleAfter)) {
		t.Fatalf("next poll at %v, want %v after the last word", next, staleAfter)
	}
	r.Loop.Clock.Advance(staleAfter - time.Millisecond)
	fl.Poll()
	if sn := r.Service.Snapshot(); sn.Radio.Stale || fl.Status().Stale {
		t.Fatal("stale before the stale time")
	}
	r.Loop.Clock.Advance(time.Millisecond)
	fl.Poll()
	if sn := r.Service.Snapshot(); !sn.Radio.Stale || !fl.Status().Stale || sn.Radio.Freq != f80 || !sn.Radio.Heard.Equal(heard) {
		t.Fatalf("after %v of silence: snapshot radio %+v, follower %+v", staleAfter, sn.Radio, fl.Status())
	}
	fl.Alive(controller.SourceRadio)
	if sn := r.Service.Snapshot(); sn.Radio.Stale || fl.Status().Stale {
		t.Fatal("still stale after the source spoke")
	}
}

// While the tuner transmits on the frequency it tunes, the radio reports that frequency (its
// TX state changed): that is the tuner's own carrier, not a change to follow, whether or not
// the follower knew the frequency before.
func TestFollowerKnowsTheTunersOwnCarrier(t *testing.T) {
	r, fl := follower(t, true)
	fl.Update(f80, controller.SourceRadio)
	pre := submitted(t, r, fl, 0)
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	follow := submitted(t, r, fl, pre.ID)
	if follow.Result.Outcome != tune.Tuned {
		t.Fatalf("follow: %+v", follow.Result)
	}
	// The operator has an API client tune elsewhere in the band; the radio reports it only once
	// the carrier is on.
	reported := 0
	r.Loop.Sensor.OnRead(func() {
		if sn := r.Service.Snapshot(); sn.State == tune.Refining && r.Loop.Radio.Transmitting() {
			fl.Update(r.Loop.Radio.Frequency(), controller.SourceRadio)
			reported++
		}
	})
	tuneAt(t, r, f80b)
	r.Loop.Sensor.OnRead(nil)
	if reported == 0 {
		t.Fatal("no report during the RF stages")
	}
	idle(t, fl, follow.ID, "reports of the tuner's own carrier")
	r.Loop.Clock.Advance(2 * settle)
	fl.Poll()
	idle(t, fl, follow.ID, "after the tune")
}

// The operator moves the VFO while the follower's tune transmits: the tuner's guard ends the
// tune (frequency changed, nothing learned), and the follower follows the new frequency once it
// has settled — not before.
func TestFollowerFollowsTheOperatorDuringRF(t *testing.T) {
	r, fl := follower(t, true)
	tuneAt(t, r, f80)
	fl.Update(f80, controller.SourceRadio)
	moved := 3720 * physic.KiloHertz
	fl.Update(3735*physic.KiloHertz, controller.SourceRadio)
	r.Loop.Radio.SetFrequency(3735 * physic.KiloHertz)
	r.Loop.Clock.Advance(settle)
	var during controller.RequestID
	r.Loop.Sensor.OnRead(fakeservice.Until(func() bool {
		if r.Service.Snapshot().State != tune.Refining {
			return false
		}
		r.Loop.Radio.SetFrequency(moved)
		fl.Update(moved, controller.SourceRadio)
		during = fl.Status().Submitted
		return true
	}))
	fl.Poll()
	first := submitted(t, r, fl, 0)
	if first.Result.Outcome != tune.FrequencyChanged || first.Result.Learned != 0 {
		t.Fatalf("the tune the operator moved away from: %+v", first.Result)
	}
	if during != first.ID {
		t.Fatalf("the follower submitted request %d during the RF stages", during)
	}
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	st := submitted(t, r, fl, first.ID)
	if st.Request.Freq != moved || st.Result.Outcome != tune.Tuned {
		t.Fatalf("after the operator's change: %+v → %+v", st.Request, st.Result)
	}
}

// A frequency the loop cannot tune is tried once (pre-position, then the follow), and not again
// and again while the radio stays there: nothing is ever keyed.
func TestFollowerDoesNotRepeatAFailure(t *testing.T) {
	r, fl := follower(t, true)
	f20 := 14200 * physic.KiloHertz // far above what the fake's capacitor reaches
	r.Loop.Radio.SetFrequency(f20)
	fl.Update(f20, controller.SourceRadio)
	pre := submitted(t, r, fl, 0)
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	st := submitted(t, r, fl, pre.ID)
	if pre.Result.Outcome != tune.OutOfRange || st.Result.Outcome != tune.OutOfRange {
		t.Fatalf("at %v: %s then %s, want out-of-range", f20, pre.Result.Outcome, st.Result.Outcome)
	}
	for range 5 {
		r.Loop.Clock.Advance(settle)
		fl.Alive(controller.SourceRadio)
		fl.Poll()
	}
	idle(t, fl, st.ID, "on a frequency that failed")
	if r.Loop.Radio.Keys() != 0 {
		t.Fatalf("%d keys on a frequency the loop cannot tune", r.Loop.Radio.Keys())
	}
}

// The service's loop drives a follower's timers between operations: a change is followed once
// it has settled, and a silent source turns stale, each at its time on the clock. (The test
// talks to the follower only while the service has no deadline to sleep to: on the virtual
// clock the service's wait moves time on at once.)
func TestServiceDrivesTheFollower(t *testing.T) {
	t.Run("settle", func(t *testing.T) {
		r := newRig(t, rigOptions{})
		fl, err := controller.NewFollower(r.Service, controller.FollowOptions{StaleAfter: -1})
		if err != nil {
			t.Fatal(err)
		}
		sub := r.Service.Subscribe(1 << 16)
		defer sub.Close()
		r.Start(t)
		fl.Update(f80, controller.SourceRadio) // the first report pre-positions at once
		submitted(t, r, fl, 0)
		fl.Update(f80b, controller.SourceRadio)
		from := fl.Status().Heard
		for {
			select {
			case e := <-sub.Events():
				if e.Kind != controller.EventRequest || e.Status.State != controller.RequestQueued || e.Status.Request.Freq != f80b {
					continue
				}
				if d := e.Status.Submitted.Sub(from); d != settle || e.Status.Request.Kind != controller.Follow {
					t.Fatalf("a %s went out %v after the change, want a follow after the settle time %v", e.Status.Request.Kind, d, settle)
				}
				if st := r.Wait(t, e.Request); st.Result.Outcome != tune.Positioned {
					t.Fatalf("the follow: %+v", st.Result)
				}
				return
			case <-time.After(fakeservice.Safety):
				t.Fatal("the service never followed the change")
			}
		}
	})
	t.Run("stale", func(t *testing.T) {
		r := newRig(t, rigOptions{})
		fl, err := controller.NewFollower(r.Service, controller.FollowOptions{})
		if err != nil {
			t.Fatal(err)
		}
		sub := r.Service.Subscribe(1 << 16)
		defer sub.Close()
		r.Start(t)
		fl.Update(f80, controller.SourceRadio)
		heard := fl.Status().Heard
		for {
			select {
			case e := <-sub.Events():
				if e.Kind != controller.EventSnapshot || !e.Snapshot.Radio.Stale {
					continue
				}
				if d := e.At.Sub(heard); d != staleAfter || e.Snapshot.Radio.Freq != f80 {
					t.Fatalf("stale %v after the last word, at %v; want %v", d, e.Snapshot.Radio.Freq, staleAfter)
				}
				return
			case <-time.After(fakeservice.Safety):
				t.Fatal("the service never marked the silent source stale")
			}
		}
	})
}

// A Follow that finds the radio elsewhere (off-frequency: the source did not report a move) is
// not tried again until the source reports where the radio went; then that is followed.
func TestFollowerWaitsForANewReportAfterAMiss(t *testing.T) {
	r, fl := follower(t, true)
	r.Loop.Radio.SetFrequency(f80)
	fl.Update(f80, controller.SourceRadio)
	pre := submitted(t, r, fl, 0)
	r.Loop.Radio.SetFrequency(f80b) // the radio moves; the source misses it
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	miss := submitted(t, r, fl, pre.ID)
	if miss.Result.Outcome != tune.OffFrequency || r.Loop.Radio.Keys() != 0 {
		t.Fatalf("the follow at the old frequency: %s, %d keys; want off-frequency, nothing keyed", miss.Result.Outcome, r.Loop.Radio.Keys())
	}
	for range 3 {
		r.Loop.Clock.Advance(settle)
		fl.Alive(controller.SourceRadio)
		fl.Poll()
	}
	idle(t, fl, miss.ID, "with no report of where the radio went")
	fl.Update(f80b, controller.SourceRadio)
	r.Loop.Clock.Advance(settle)
	fl.Poll()
	if st := submitted(t, r, fl, miss.ID); st.Request.Freq != f80b || st.Result.Outcome != tune.Tuned {
		t.Fatalf("once reported: %+v → %+v", st.Request, st.Result)
	}
}
