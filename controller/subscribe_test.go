package controller_test

import (
	"slices"
	"testing"
	"time"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/tune"
)

func seqs(evs []controller.Event) []uint64 {
	out := make([]uint64, len(evs))
	for i, e := range evs {
		out[i] = e.Seq
	}
	return out
}

// consecutive checks that evs are numbered without a gap.
func consecutive(t *testing.T, what string, evs []controller.Event) {
	t.Helper()
	for i := 1; i < len(evs); i++ {
		if evs[i].Seq != evs[i-1].Seq+1 {
			t.Fatalf("%s: event %d has seq %d after %d", what, i, evs[i].Seq, evs[i-1].Seq)
		}
	}
}

// Every subscriber sees every event, in the same order, numbered without gaps: the tuner's
// steps, the request's life and the snapshots.
func TestManySubscribers(t *testing.T) {
	r := newRig(t, rigOptions{})
	const depth = 1 << 16 // far more than one tune's events
	subs := []*controller.Subscription{r.Service.Subscribe(depth), r.Service.Subscribe(depth), r.Service.Subscribe(depth)}
	stop := r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	st, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80})
	if res.Outcome != tune.Tuned {
		t.Fatalf("tune: %s (%v)", res.Outcome, res.Err)
	}
	stop() // no events after Run has returned
	var first []controller.Event
	for i, sub := range subs {
		evs := fakeservice.Drain(sub)
		sub.Close()
		if sub.Dropped() != 0 {
			t.Fatalf("subscriber %d dropped %d events with room for %d", i, sub.Dropped(), depth)
		}
		consecutive(t, "subscriber", evs)
		if i == 0 {
			first = evs
			continue
		}
		if !slices.Equal(seqs(evs), seqs(first)) {
			t.Fatalf("subscriber %d saw seqs %v…, subscriber 0 %v…", i, seqs(evs)[:5], seqs(first)[:5])
		}
	}
	kinds := map[controller.EventKind]int{}
	tuneKinds := map[tune.Kind]int{}
	var states []controller.RequestState
	for _, e := range first {
		kinds[e.Kind]++
		switch e.Kind {
		case controller.EventTune:
			tuneKinds[e.Tune.Kind]++
			if e.Request != st.ID {
				t.Fatalf("tuner event %s during request %d carries request %d", e.Tune.Kind, st.ID, e.Request)
			}
		case controller.EventRequest:
			states = append(states, e.Status.State)
		}
	}
	for _, k := range []tune.Kind{tune.KindState, tune.KindPrediction, tune.KindMove, tune.KindReading, tune.KindNoise, tune.KindFit, tune.KindResult} {
		if tuneKinds[k] == 0 {
			t.Errorf("no %s event in a whole tune (got %v)", k, tuneKinds)
		}
	}
	if !slices.Equal(states, []controller.RequestState{controller.RequestQueued, controller.RequestRunning, controller.RequestDone}) {
		t.Errorf("request events %v, want queued, running, done", states)
	}
	if kinds[controller.EventSnapshot] == 0 {
		t.Error("no snapshot events")
	}
	// A closed subscription's channel is closed and gets nothing more.
	if _, ok := <-subs[0].Events(); ok {
		t.Error("event on a closed subscription")
	}
}

// A subscriber that never reads holds up nothing: the tune runs to completion, the subscriber
// keeps only the newest events of its depth, and counts the rest as dropped.
func TestSlowSubscriberNeverBlocksTheTuner(t *testing.T) {
	r := newRig(t, rigOptions{})
	const depth = 4
	slow := r.Service.Subscribe(depth)
	all := r.Service.Subscribe(1 << 16)
	stop := r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	if _, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Tuned {
		t.Fatalf("tune: %s (%v)", res.Outcome, res.Err)
	}
	stop()
	every := fakeservice.Drain(all)
	kept := fakeservice.Drain(slow)
	if all.Dropped() != 0 || len(every) < 100 {
		t.Fatalf("the full subscriber got %d events and dropped %d; a tune makes hundreds", len(every), all.Dropped())
	}
	if len(kept) != depth || slow.Dropped() != uint64(len(every)-depth) {
		t.Fatalf("the slow subscriber kept %d and dropped %d of %d events, want %d kept", len(kept), slow.Dropped(), len(every), depth)
	}
	if !slices.Equal(seqs(kept), seqs(every[len(every)-depth:])) {
		t.Fatalf("the slow subscriber kept %v, want the newest %v", seqs(kept), seqs(every[len(every)-depth:]))
	}
}

// While the tuner scans, snapshots keep coming with the position and the SWR moving, at most
// one per SnapshotInterval but for changes of state; during a pre-position, which reads
// nothing, the position moves in them all the same.
func TestSnapshotFreshDuringScan(t *testing.T) {
	// A poor prior (σ 10 % of the position, 800 steps off) makes for a long coarse scan.
	r := newRig(t, rigOptions{loop: fakeloop.Options{PriorSigma: 0.1, PriorError: 800}})
	sub := r.Service.Subscribe(1 << 16)
	r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	if _, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80}); res.Outcome != tune.Tuned {
		t.Fatalf("tune: %s (%v)", res.Outcome, res.Err)
	}
	var snaps []controller.Snapshot
	readings, changes := 0, 0
	var from, to time.Time
	for _, e := range fakeservice.Drain(sub) {
		switch {
		case e.Kind == controller.EventTune && e.Tune.State == tune.Scanning && e.Tune.Kind == tune.KindReading:
			readings++
		case e.Kind == controller.EventTune && e.Tune.Kind == tune.KindState && e.Tune.State == tune.Scanning:
			changes++
			if from.IsZero() {
				from = e.At
			}
		case e.Kind == controller.EventTune && e.Tune.Kind == tune.KindState && e.Tune.From == tune.Scanning && e.Tune.State != tune.Scanning:
			to = e.At
		case e.Kind == controller.EventSnapshot && e.Snapshot.State == tune.Scanning:
			snaps = append(snaps, *e.Snapshot)
		}
	}
	scan := to.Sub(from)
	t.Logf("a %v scan: %d readings, %d snapshots, %d changes of state", scan, readings, len(snaps), changes)
	// 50 ms, the default SnapshotInterval: one snapshot per interval, one per change of state.
	if most := int(scan/(50*time.Millisecond)) + changes + 1; len(snaps) > most {
		t.Fatalf("%d snapshots in a %v scan with %d changes of state: more than %d, not throttled", len(snaps), scan, changes, most)
	}
	if len(snaps) < 3 || readings < 5*len(snaps) {
		t.Fatalf("%d snapshots and %d readings in a %v scan: want at least 3 snapshots, and far fewer than readings", len(snaps), readings, scan)
	}
	pos, swr := map[int64]bool{}, map[float64]bool{}
	for i, sn := range snaps {
		pos[sn.Axis.Position], swr[sn.Live.SWR] = true, true
		if sn.Request == 0 || sn.Live.Freq != f80 || sn.Live.Forward <= 0 || sn.Live.Reflected <= 0 {
			t.Fatalf("snapshot %d during the scan: request %d, live %+v", i, sn.Request, sn.Live)
		}
	}
	if len(pos) < 3 || len(swr) < 3 {
		t.Fatalf("%d snapshots during the scan show %d positions and %d SWRs: not moving", len(snaps), len(pos), len(swr))
	}

	// A pre-position from 80 m to 160 m takes a few seconds of moving, with no readings.
	fakeservice.Drain(sub)
	if _, res := r.Do(t, controller.Request{Kind: controller.Preposition, Freq: f160}); res.Outcome != tune.Positioned {
		t.Fatalf("pre-position: %s (%v)", res.Outcome, res.Err)
	}
	moving := map[int64]bool{}
	for _, e := range fakeservice.Drain(sub) {
		if e.Kind == controller.EventSnapshot && e.Snapshot.State == tune.Positioning {
			moving[e.Snapshot.Axis.Position] = true
		}
	}
	// 50 000 steps at 16 000 steps/s (the fake's axis options) is about 3 s: dozens of 50 ms
	// snapshots; ask for ten.
	t.Logf("%d positions in the snapshots of the pre-position", len(moving))
	if len(moving) < 10 {
		t.Fatalf("only %d positions in the snapshots of a long pre-position", len(moving))
	}
}

// EventsSince returns what a reconnecting listener missed, as long as the backlog holds it.
func TestEventsSinceResumes(t *testing.T) {
	const backlog = 50
	r := newRig(t, rigOptions{svc: controller.Options{Backlog: backlog}})
	all := r.Service.Subscribe(1 << 16)
	short := r.Service.Subscribe(1 << 16)
	stop := r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	r.Do(t, controller.Request{Kind: controller.Preposition, Freq: f80})
	// A listener reads a few events and goes away.
	var seen uint64
	for range 3 {
		seen = (<-short.Events()).Seq
	}
	short.Close()
	every := fakeservice.Drain(all)
	evs, complete := r.Service.EventsSince(seen)
	want := 0
	for _, e := range every {
		if e.Seq > seen {
			want++
		}
	}
	if want == 0 || want > backlog {
		t.Fatalf("a pre-position made %d events after the third: the test needs some, and fewer than the backlog of %d", want, backlog)
	}
	if !complete || len(evs) != want || evs[0].Seq != seen+1 {
		t.Fatalf("EventsSince(%d): %d events (complete %v), want the %d after it", seen, len(evs), complete, want)
	}
	r.Loop.Radio.SetFrequency(f80)
	r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80})
	stop()
	every = append(every, fakeservice.Drain(all)...)
	last := every[len(every)-1].Seq
	// Long after: the backlog holds only the newest, and says what it lost.
	evs, complete = r.Service.EventsSince(seen)
	if complete || len(evs) != backlog || evs[len(evs)-1].Seq != last {
		t.Fatalf("EventsSince(%d) after a tune: %d events up to %d, complete %v; want the last %d, up to %d, incomplete",
			seen, len(evs), evs[len(evs)-1].Seq, complete, backlog, last)
	}
	consecutive(t, "backlog", evs)
	for i, e := range evs {
		if w := every[len(every)-backlog+i]; w.Seq != e.Seq || w.Kind != e.Kind {
			t.Fatalf("backlog event %d is %d %s, the stream had %d %s", i, e.Seq, e.Kind, w.Seq, w.Kind)
		}
	}
	if evs, complete := r.Service.EventsSince(last - 10); !complete || len(evs) != 10 || evs[0].Seq != last-9 {
		t.Fatalf("EventsSince(last-10): %d events from %d, complete %v", len(evs), evs[0].Seq, complete)
	}
	if evs, complete := r.Service.EventsSince(last); !complete || len(evs) != 0 {
		t.Fatalf("EventsSince(last): %d events, complete %v; want none, complete", len(evs), complete)
	}
}
