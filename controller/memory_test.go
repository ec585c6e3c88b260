package controller_test

import (
	"context"
	"errors"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/tune"
)

// importPoints are a small map of the fake loop: positions where its dips are (fakeloop's
// model: 240 000·(1 MHz/f)² + 30 + 20 steps), learned an hour apart.
func importPoints() []memmap.Point {
	at := time.Date(2025, time.December, 31, 9, 0, 0, 0, time.UTC)
	return []memmap.Point{
		{Freq: 7100 * physic.KiloHertz, Pos: 4811, At: at.Add(2 * time.Hour), SWR: 1.2, Q: 1000},
		{Freq: 1850 * physic.KiloHertz, Pos: 70174, At: at, SWR: 1.3},
		{Freq: 3600 * physic.KiloHertz, Pos: 18569, At: at.Add(time.Hour), Temp: physic.ZeroCelsius + 12*physic.Kelvin, HasTemp: true},
	}
}

func freqs(pts []memmap.Point) []physic.Frequency {
	out := make([]physic.Frequency, len(pts))
	for i, p := range pts {
		out[i] = p.Freq
	}
	return out
}

// An import waits for the operation that runs, then replaces the map whole: the old map is
// kept aside in the state directory (and reads back), the new one is saved, and the snapshot
// counts its points.
func TestImportMapBetweenOperations(t *testing.T) {
	dir := openDir(t, t.TempDir())
	st := loadState(t, dir)
	var atEnd []physic.Frequency // the map's points when the tune was done, before any edit
	r := newRig(t, rigOptions{svc: controller.Options{State: st, AfterOperation: func(controller.RequestStatus) {
		atEnd = freqs(st.Map().Points())
	}}})
	queued := make(chan struct{}, 1)
	controller.OnEditQueued(r.Service, func() { queued <- struct{}{} })
	type imported struct {
		res controller.MapImport
		err error
	}
	done := make(chan imported, 1)
	r.Loop.Sensor.OnRead(fakeservice.Until(func() bool {
		if r.Service.Snapshot().State != tune.Refining {
			return false
		}
		go func() {
			res, err := r.Service.ImportMap(context.Background(), importPoints())
			done <- imported{res, err}
		}()
		select { // the import is waiting before the tune goes on
		case <-queued:
		case <-time.After(fakeservice.Safety):
			t.Error("the import was never queued")
		}
		return true
	}))
	r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	_, res := r.Do(t, controller.Request{Kind: controller.Tune, Freq: f80})
	if res.Outcome != tune.Tuned {
		t.Fatalf("tune: %s (%v)", res.Outcome, res.Err)
	}
	if !slices.Equal(atEnd, []physic.Frequency{f80}) {
		t.Fatalf("the map at the end of the tune held %v, want only the tune's point at %v: the import ran during the operation", atEnd, f80)
	}
	var got imported
	select {
	case got = <-done:
	case <-time.After(fakeservice.Safety):
		t.Fatal("the import never finished")
	}
	if got.err != nil {
		t.Fatal(got.err)
	}
	want := []physic.Frequency{1850 * physic.KiloHertz, 3600 * physic.KiloHertz, 7100 * physic.KiloHertz}
	if got.res.Before != 1 || got.res.After != 3 || !slices.Equal(freqs(st.Map().Points()), want) {
		t.Fatalf("import: %+v, map %v; want 1 point before, %v after", got.res, freqs(st.Map().Points()), want)
	}
	if base := filepath.Base(got.res.Aside); !strings.HasPrefix(base, statedir.MapFile+".before-import-") {
		t.Fatalf("kept aside as %q", got.res.Aside)
	}
	old, err := memmap.Load(got.res.Aside, memmap.Options{})
	if err != nil || !slices.Equal(freqs(old.Points()), []physic.Frequency{f80}) {
		t.Fatalf("the map kept aside: %v (%v), want the tune's point at %v", old, err, f80)
	}
	saved, err := memmap.Load(dir.MapPath(), memmap.Options{})
	if err != nil || !slices.Equal(freqs(saved.Points()), want) {
		t.Fatalf("the map saved: %v, %v", saved, err)
	}
	if n := r.Service.Snapshot().MapPoints; n != 3 {
		t.Fatalf("snapshot: %d map points, want 3", n)
	}
	// A second import in the same second keeps the first's copy too.
	again, err := r.Service.ImportMap(context.Background(), importPoints()[:1])
	if err != nil || again.Aside == got.res.Aside || again.Aside == "" {
		t.Fatalf("second import: %+v, %v; want another copy aside than %q", again, err, got.res.Aside)
	}
}

// Every bad point is named with its field, and nothing changes.
func TestImportMapRefusesBadPoints(t *testing.T) {
	r := newRig(t, rigOptions{})
	r.Start(t)
	lo, hi := r.Axis.SoftLimits()
	good := importPoints()[0]
	bad := []memmap.Point{
		good,
		{Freq: 0, Pos: 5000},
		{Freq: f80, Pos: hi + 1},
		{Freq: f80, Pos: lo - 1, SWR: 0.5},
		{Freq: f80, Pos: 5000, Q: -3},
		{Freq: f80, Pos: 5000, Temp: -1, HasTemp: true},
	}
	_, err := r.Service.ImportMap(context.Background(), bad)
	var pe controller.PointsError
	if !errors.As(err, &pe) {
		t.Fatalf("import of bad points: %v, want a PointsError", err)
	}
	type key struct {
		i     int
		field string
	}
	var got []key
	for _, e := range pe {
		got = append(got, key{e.Index, e.Field})
	}
	want := []key{{1, "frequency_hz"}, {2, "position"}, {3, "position"}, {3, "swr"}, {4, "q"}, {5, "temperature_c"}}
	if !slices.Equal(got, want) {
		t.Fatalf("bad points named %v, want %v (%v)", got, want, err)
	}
	if n := len(r.Service.MapPoints()); n != 0 {
		t.Fatalf("a refused import left %d points", n)
	}
	many := make([]memmap.Point, controller.MaxImportPoints+1)
	if _, err := r.Service.ImportMap(context.Background(), many); !errors.As(err, &pe) {
		t.Fatalf("import of %d points: %v, want refused", len(many), err)
	}
}

// An empty import empties the map; ForgetPoint removes the point within the tolerance, and
// says when there is none.
func TestForgetPoint(t *testing.T) {
	dir := openDir(t, t.TempDir())
	st := loadState(t, dir)
	r := newRig(t, rigOptions{svc: controller.Options{State: st}})
	r.Start(t)
	ctx := context.Background()
	if _, err := r.Service.ImportMap(ctx, importPoints()); err != nil {
		t.Fatal(err)
	}
	f := 3600 * physic.KiloHertz
	if _, err := r.Service.ForgetPoint(ctx, f+2*physic.Hertz, physic.Hertz); !errors.Is(err, controller.ErrNoPoint) {
		t.Fatalf("forget 2 Hz off with a 1 Hz tolerance: %v, want ErrNoPoint", err)
	}
	p, err := r.Service.ForgetPoint(ctx, f+physic.Hertz/2, physic.Hertz)
	if err != nil || p.Freq != f || p.Pos != 18569 {
		t.Fatalf("forget %v: %+v, %v", f, p, err)
	}
	saved, err := memmap.Load(dir.MapPath(), memmap.Options{})
	if err != nil || saved.Len() != 2 || r.Service.Snapshot().MapPoints != 2 {
		t.Fatalf("after forgetting: %v on disk (%v), %d in the snapshot; want 2", saved, err, r.Service.Snapshot().MapPoints)
	}
	if _, err := r.Service.ForgetPoint(ctx, f, physic.Hertz); !errors.Is(err, controller.ErrNoPoint) {
		t.Fatalf("forget it again: %v, want ErrNoPoint", err)
	}
	if res, err := r.Service.ImportMap(ctx, nil); err != nil || res.After != 0 || r.Service.Snapshot().MapPoints != 0 {
		t.Fatalf("empty import: %+v, %v", res, err)
	}
}

// A caller that stops waiting before the run loop takes its edit withdraws it: it never runs.
// After Run has returned, edits are refused.
func TestEditWithdrawnAndAfterStop(t *testing.T) {
	r := newRig(t, rigOptions{})
	ctx, cancel := context.WithCancel(context.Background())
	controller.OnEditQueued(r.Service, cancel) // gives up as soon as it waits: Run has not started
	if _, err := r.Service.ImportMap(ctx, importPoints()); !errors.Is(err, context.Canceled) {
		t.Fatalf("import given up: %v, want context.Canceled", err)
	}
	controller.OnEditQueued(r.Service, nil)
	stop := r.Start(t)
	r.Do(t, controller.Request{Kind: controller.Goto, Step: 30000}) // Run has passed its edits
	if n := len(r.Service.MapPoints()); n != 0 {
		t.Fatalf("a withdrawn import ran: %d points", n)
	}
	stop()
	if _, err := r.Service.ImportMap(context.Background(), importPoints()); !errors.Is(err, controller.ErrStopped) {
		t.Fatalf("import after Run returned: %v, want ErrStopped", err)
	}
}

// A frequency a client sets is decided at once: a Follow if the loop is not there, nothing if
// it is; the radio reporting the same frequency later changes nothing.
func TestFollowerSettled(t *testing.T) {
	r, fl := follower(t, false)
	id, err := fl.Settled(f80, controller.SourceAPI)
	if err != nil || id == 0 {
		t.Fatalf("settled at %v: request %d, %v; want a Follow at once", f80, id, err)
	}
	st := r.Wait(t, id)
	if st.Request.Kind != controller.Follow || st.Request.Source != controller.SourceAPI || st.Result == nil || st.Result.Outcome != tune.Positioned {
		t.Fatalf("the request: %+v", st)
	}
	if again, err := fl.Settled(f80, controller.SourceAPI); err != nil || again != 0 {
		t.Fatalf("settled at the same frequency again: request %d, %v; want none", again, err)
	}
	fl.Update(f80, controller.SourceRadio)
	r.Loop.Clock.Advance(2 * settle)
	fl.Poll()
	idle(t, fl, id, "the radio reporting the frequency set")
	if _, err := fl.Settled(0, controller.SourceAPI); err == nil {
		t.Fatal("settled at 0 Hz accepted")
	}
	if _, err := fl.Settled(f80, "neighbour"); err == nil {
		t.Fatal("settled from an unknown source accepted")
	}
}
