package sweeps_test

import (
	"errors"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
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

// Each tune makes one recording that controller/record reads: a sample for every reading, at
// its time, step, frequency and powers, with the direction of the move it was taken on (at
// rest, of the motor's last travel, by the hardware's account), and a header that says what the
// operation was and what it found. The second tune starts near the dip and takes another path.
func TestTuneRecording(t *testing.T) {
	r := newRig(t, rigOptions{store: sweeps.Options{Meta: map[string]string{"loop": "test loop"}}})
	var st []controller.RequestStatus
	var w []sweeps.Info
	for range 2 {
		st = append(st, r.tune(t, f80))
		w = append(w, r.nextWrite(t))
	}
	r.stop()
	evs := r.events()
	if got, want := r.store.List(), []sweeps.Info{w[1], w[0]}; !slices.Equal(got, want) {
		t.Fatalf("List = %+v, want the recordings written, newest first, %+v", got, want)
	}
	var dirs directions
	for i := range st {
		checkRecording(t, r, evs, st[i], w[i], &dirs)
	}
	if dirs.up == 0 || dirs.down == 0 || dirs.arrivals == 0 {
		t.Errorf("%d samples up, %d down, %d at rest after an approach from the far side: want each at least once "+
			"(otherwise these tunes do not test directions)", dirs.up, dirs.down, dirs.arrivals)
	}
}

type directions struct{ up, down, arrivals int }

// checkRecording checks recording w against the events of the tune st.
func checkRecording(t *testing.T, r *rig, evs []controller.Event, st controller.RequestStatus, w sweeps.Info, dirs *directions) {
	t.Helper()
	res := *st.Result
	info, h, samples := read(t, r.store, w.ID)
	if info != w {
		t.Errorf("Open's info %+v, List's %+v", info, w)
	}
	if fi, err := os.Stat(filepath.Join(r.dir, w.ID+".sweep")); err != nil || fi.Size() != info.Size {
		t.Errorf("file: %v, %v; info says %d bytes", fi, err, info.Size)
	}
	if !info.Time.Equal(st.Started) || !h.Start.Equal(st.Started) || info.Request != st.ID ||
		info.Kind != controller.Tune || info.Outcome != tune.Tuned || info.Freq != f80 {
		t.Errorf("info %+v, header start %v; want the tune's: request %d started %v at %v", info, h.Start, st.ID, st.Started, f80)
	}
	if want := st.Started.UTC().Format("20060102T150405Z") + "-" + strconv.Itoa(int(1e6 + st.ID))[1:]; info.ID != want {
		t.Errorf("ID %q, want %q", info.ID, want)
	}

	// the readings, and the move each was taken on
	type reading struct {
		e    *tune.Event
		move *tune.Event
	}
	var readings []reading
	var move *tune.Event
	var backlash motion.Steps
	for _, e := range evs {
		if e.Request != st.ID {
			continue
		}
		switch {
		case e.Kind == controller.EventSnapshot:
			backlash = e.Snapshot.Axis.Backlash
		case e.Kind != controller.EventTune:
		case e.Tune.Kind == tune.KindMove:
			move = e.Tune
		case e.Tune.Kind == tune.KindReading:
			readings = append(readings, reading{e.Tune, move})
		}
	}
	// The result also counts the carrier-detection polls, which the tuner reports as no event.
	if len(samples) != len(readings) || len(samples) == 0 || len(samples) > res.Readings || info.Samples != len(samples) {
		t.Fatalf("%d samples (info says %d), %d reading events, the result says %d readings",
			len(samples), info.Samples, len(readings), res.Readings)
	}
	for i, s := range samples {
		e, mv := readings[i].e, readings[i].move
		var want motion.Direction
		if mv != nil && mv.Speed > 0 { // taken on a sweep: the sweep's direction
			want = motion.Down
			if float64(mv.Target) > mv.Pos {
				want = motion.Up
			}
		} else { // at rest after a positioning move: the way the motor last went
			want = r.travel(e.At)
			if mv != nil && float64(mv.Target) != mv.Pos && (float64(mv.Target) > mv.Pos) != (want == motion.Up) {
				dirs.arrivals++ // an approach from the far side, ending on a run-up the other way
			}
		}
		if s.Dir != want {
			t.Errorf("request %d sample %d (%s stage, after move %+v): direction %s, want %s", st.ID, i, e.Stage, mv, s.Dir, want)
		}
		if s.Dir == motion.Up {
			dirs.up++
		} else {
			dirs.down++
		}
		g2 := math.Min(math.Max(e.Gamma2, 0), 1)
		wantSample := record.Sample{T: e.At.Sub(h.Start), Step: motion.Steps(math.Round(e.Pos)), Dir: want, Freq: f80,
			Forward: e.Forward, Reflected: physic.Power(math.Round(g2 * float64(e.Forward))), SWR: e.SWR}
		if s != wantSample && !(math.IsNaN(s.SWR) && math.IsNaN(e.SWR)) {
			t.Errorf("request %d sample %d = %+v, want %+v", st.ID, i, s, wantSample)
		}
	}

	if backlash != fakeservice.Nominal || res.Fit == nil || res.Fit.QLoaded <= 0 || res.SWR < 1 {
		t.Fatalf("backlash %d, fit %+v, verified SWR %g: the tune did not give what the header should show", backlash, res.Fit, res.SWR)
	}
	want := map[string]string{
		"source":               "tankd",
		"loop":                 "test loop",
		"request":              strconv.FormatUint(uint64(st.ID), 10),
		"kind":                 "tune",
		"request_source":       "api",
		"state":                "done",
		"outcome":              "tuned",
		"freq_hz":              "3750000",
		"samples":              strconv.Itoa(len(samples)),
		"final_step":           strconv.FormatInt(int64(res.Pos), 10),
		"verified_swr":         strconv.FormatFloat(res.SWR, 'g', -1, 64),
		"fit_method":           res.Fit.Method,
		"fit_centre_step":      strconv.FormatFloat(res.Fit.Centre, 'g', -1, 64),
		"fit_half_width_steps": strconv.FormatFloat(res.Fit.HalfWidth, 'g', -1, 64),
		"fit_q":                strconv.FormatFloat(res.Fit.QLoaded, 'g', -1, 64),
		"fit_min_swr":          strconv.FormatFloat(res.Fit.MinSWR, 'g', -1, 64),
		"backlash_steps":       strconv.FormatInt(int64(backlash), 10),
		"rf_s":                 strconv.FormatFloat(res.RFTime.Seconds(), 'g', -1, 64),
		"finished":             res.Finished.UTC().Format(time.RFC3339Nano),
	}
	for k, v := range want {
		if h.Meta[k] != v {
			t.Errorf("request %d metadata %s = %q, want %q", st.ID, k, h.Meta[k], v)
		}
	}
	for k, v := range h.Meta {
		if _, ok := want[k]; !ok {
			t.Errorf("request %d metadata %s = %q not expected", st.ID, k, v)
		}
	}
}

// A follow without RF moves the motor but takes no readings: it leaves no recording. The tune
// after it does.
func TestFollowWithoutRFRecordsNothing(t *testing.T) {
	r := newRig(t, rigOptions{})
	fl, res := r.Do(t, controller.Request{Kind: controller.Follow, Freq: f80b, Source: controller.SourceRadio})
	if res.Outcome != tune.Positioned {
		t.Fatalf("follow: %s (%v)", res.Outcome, res.Err)
	}
	tn := r.tune(t, f80)
	w := r.nextWrite(t)
	r.stop()
	moves, readings := 0, 0
	for _, e := range r.events() {
		if e.Kind == controller.EventTune && e.Request == fl.ID {
			switch e.Tune.Kind {
			case tune.KindMove:
				moves++
			case tune.KindReading:
				readings++
			}
		}
	}
	if moves == 0 || readings != 0 {
		t.Fatalf("the follow made %d moves and %d readings: want a move and no reading", moves, readings)
	}
	if l := r.store.List(); len(l) != 1 || l[0].Request != tn.ID || w.Request != tn.ID {
		t.Fatalf("List = %+v, written %+v: want only the tune's (request %d)", l, w, tn.ID)
	}
	if got := files(t, r.dir); !slices.Equal(got, []string{w.ID + ".sweep"}) {
		t.Fatalf("directory holds %v, want only the tune's recording", got)
	}
}

// tunes runs three tunes and returns the recordings written, oldest first.
func tunes(t *testing.T, r *rig) []sweeps.Info {
	t.Helper()
	var out []sweeps.Info
	for _, f := range []physic.Frequency{f80, f80b, f80} {
		st := r.tune(t, f)
		w := r.nextWrite(t)
		if w.Request != st.ID {
			t.Fatalf("recording %+v written for tune %d", w, st.ID)
		}
		out = append(out, w)
	}
	return out
}

// With room for two recordings, the third drops the first.
func TestRetentionByCount(t *testing.T) {
	r := newRig(t, rigOptions{store: sweeps.Options{MaxCount: 2}})
	w := tunes(t, r)
	r.stop()
	if got, want := ids(r.store.List()), []string{w[2].ID, w[1].ID}; !slices.Equal(got, want) {
		t.Fatalf("List = %v, want the two newest, %v", got, want)
	}
	if got, want := files(t, r.dir), []string{w[1].ID + ".sweep", w[2].ID + ".sweep"}; !slices.Equal(got, want) {
		t.Fatalf("directory holds %v, want %v", got, want)
	}
	if _, _, err := r.store.Open(w[0].ID); !errors.Is(err, sweeps.ErrNotFound) {
		t.Fatalf("Open(the dropped recording) = %v, want ErrNotFound", err)
	}
}

// With room for exactly the two newest recordings' bytes, the third drops the first and keeps
// the second. The sizes come from an identical run (the fake loop and the virtual clock make
// every run the same).
func TestRetentionBySize(t *testing.T) {
	free := newRig(t, rigOptions{})
	sizes := tunes(t, free)
	free.stop()

	// room for the two newest together, and for each alone (the first, a tune from the physics
	// prior with a scan, holds more readings than the two from the map)
	limit := max(sizes[1].Size+sizes[2].Size, sizes[0].Size)
	if limit >= sizes[0].Size+sizes[1].Size+sizes[2].Size || sizes[0].Size+sizes[2].Size <= limit && sizes[0].Size > sizes[1].Size {
		t.Fatalf("sizes %d %d %d do not test the limit", sizes[0].Size, sizes[1].Size, sizes[2].Size)
	}
	r := newRig(t, rigOptions{store: sweeps.Options{MaxBytes: limit}})
	w := tunes(t, r)
	r.stop()
	for i := range w {
		if w[i].ID != sizes[i].ID || w[i].Size != sizes[i].Size {
			t.Fatalf("recording %d is %s, %d bytes in this run and %s, %d in the first: runs differ", i, w[i].ID, w[i].Size, sizes[i].ID, sizes[i].Size)
		}
	}
	if got, want := ids(r.store.List()), []string{w[2].ID, w[1].ID}; !slices.Equal(got, want) {
		t.Fatalf("List = %v with %d bytes allowed (sizes %d, %d, %d), want %v", got, limit, w[0].Size, w[1].Size, w[2].Size, want)
	}
	if got, want := files(t, r.dir), []string{w[1].ID + ".sweep", w[2].ID + ".sweep"}; !slices.Equal(got, want) {
		t.Fatalf("directory holds %v, want %v", got, want)
	}
}

// Open takes nothing but an ID of a recording the store holds: no path, no other spelling.
func TestOpenRefusesWhatIsNotOurs(t *testing.T) {
	r := newRig(t, rigOptions{})
	r.tune(t, f80)
	w := r.nextWrite(t)
	r.stop()
	if err := os.WriteFile(filepath.Join(r.dir, "notes.txt"), []byte("not a recording\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(filepath.Dir(r.dir), "x"), []byte("outside\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	stamp, num, _ := strings.Cut(w.ID, "-")
	for _, bad := range []string{
		"", "../x", "..", ".", "x", "/etc/passwd", "notes.txt",
		w.ID + ".sweep", w.ID + "/../" + w.ID, "../sweeps/" + w.ID, w.ID + "/", " " + w.ID, w.ID + "\x00",
		strings.ToLower(w.ID), stamp + "-0" + num, stamp + "-" + num[1:], stamp + "-+" + num[1:], stamp + "_" + num,
		"20261301T000000Z-000001", "20260101T240000Z-000001", "20260101T000000-000001",
		"%2e%2e%2fx", "..%2fx",
	} {
		if _, rc, err := r.store.Open(bad); !errors.Is(err, sweeps.ErrInvalidID) {
			if rc != nil {
				rc.Close()
			}
			t.Errorf("Open(%q) = %v, want ErrInvalidID", bad, err)
		}
	}
	for _, unknown := range []string{"20250101T000000Z-000001", stamp + "-" + strconv.Itoa(int(1e6 + w.Request + 1))[1:]} {
		_, _, err := r.store.Open(unknown)
		if !errors.Is(err, sweeps.ErrNotFound) || !errors.Is(err, fs.ErrNotExist) {
			t.Errorf("Open(%q) = %v, want ErrNotFound (an fs.ErrNotExist)", unknown, err)
		}
	}
	_, rc, err := r.store.Open(w.ID)
	if err != nil {
		t.Fatalf("Open(%q): %v", w.ID, err)
	}
	rc.Close()
}

// A directory left over-full by an earlier run (with smaller limits now) is trimmed when the
// store opens: oldest first, temporary files removed, damaged files of ours counted and dropped
// in their turn, other files left alone.
func TestOpenTrimsLeftoverDirectory(t *testing.T) {
	r := newRig(t, rigOptions{})
	w := tunes(t, r)
	r.stop()
	dir := r.dir
	oldDamaged := "20250101T000000Z-000001.sweep" // older than every recording: dropped first
	newDamaged := "20270101T000000Z-000001.sweep" // newer: kept, not listed
	temp := "." + w[2].ID + ".sweep.tmp-4242"
	foreign := []string{"notes.txt", "x.sweep", "20250101T000000Z-1.sweep", ".hidden"}
	for _, n := range append(slices.Clone(foreign), oldDamaged, temp) {
		if err := os.WriteFile(filepath.Join(dir, n), []byte("tankd-sweep 1\ngarbage\n"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.Mkdir(filepath.Join(dir, "20250101T000000Z-000002.sweep"), 0o750); err != nil {
		t.Fatal(err)
	}
	foreign = append(foreign, "20250101T000000Z-000002.sweep")
	// A recording that lost its last line: it parses, but has fewer samples than its header says.
	copyFile(t, filepath.Join(dir, w[0].ID+".sweep"), filepath.Join(dir, newDamaged), func(b []byte) []byte {
		b = b[:len(b)-1]
		return b[:strings.LastIndexByte(string(b), '\n')+1]
	})

	// five of ours (two damaged), room for three
	s, err := sweeps.Open(dir, sweeps.Options{MaxCount: 3})
	if err != nil {
		t.Fatal(err)
	}
	if got, want := ids(s.List()), []string{w[2].ID, w[1].ID}; !slices.Equal(got, want) {
		t.Fatalf("List = %v, want %v", got, want)
	}
	want := append(slices.Clone(foreign), newDamaged, w[1].ID+".sweep", w[2].ID+".sweep")
	slices.Sort(want)
	if got := files(t, dir); !slices.Equal(got, want) {
		t.Fatalf("directory holds %v, want %v", got, want)
	}
	if _, _, err := s.Open(strings.TrimSuffix(newDamaged, ".sweep")); !errors.Is(err, sweeps.ErrNotFound) {
		t.Fatalf("Open(a damaged recording) = %v, want ErrNotFound", err)
	}

	// room for the newest recording's bytes only: the damaged newer file counts too, and only
	// what is older than it goes
	newSize := size(t, dir, strings.TrimSuffix(newDamaged, ".sweep"))
	s, err = sweeps.Open(dir, sweeps.Options{MaxBytes: newSize + w[2].Size})
	if err != nil {
		t.Fatal(err)
	}
	if got, want := ids(s.List()), []string{w[2].ID}; !slices.Equal(got, want) {
		t.Fatalf("List = %v, want %v", got, want)
	}
	want = append(slices.Clone(foreign), newDamaged, w[2].ID+".sweep")
	slices.Sort(want)
	if got := files(t, dir); !slices.Equal(got, want) {
		t.Fatalf("directory holds %v, want %v", got, want)
	}
	_, h, samples := read(t, s, w[2].ID)
	if len(samples) != w[2].Samples || h.Meta["request"] != strconv.FormatUint(uint64(w[2].Request), 10) {
		t.Fatalf("the kept recording reads %d samples of request %s, want %d of %d", len(samples), h.Meta["request"], w[2].Samples, w[2].Request)
	}
}

// A recording dropped while a reader has it open is read to its end; after the drop, Open says
// it is not found.
func TestReaderKeepsADroppedRecording(t *testing.T) {
	r := newRig(t, rigOptions{store: sweeps.Options{MaxCount: 1}})
	r.tune(t, f80)
	first := r.nextWrite(t)
	_, rc, err := r.store.Open(first.ID)
	if err != nil {
		t.Fatal(err)
	}
	defer rc.Close()
	r.tune(t, f80b)
	second := r.nextWrite(t)
	r.stop()
	if got := ids(r.store.List()); !slices.Equal(got, []string{second.ID}) {
		t.Fatalf("List = %v, want only %s", got, second.ID)
	}
	if _, err := os.Stat(filepath.Join(r.dir, first.ID+".sweep")); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("the first recording's file: %v, want it gone", err)
	}
	if _, _, err := r.store.Open(first.ID); !errors.Is(err, sweeps.ErrNotFound) {
		t.Fatalf("Open(the dropped recording) = %v, want ErrNotFound", err)
	}
	h, samples, err := record.ReadAll(rc)
	if err != nil || len(samples) != first.Samples || h.Meta["samples"] != strconv.Itoa(first.Samples) {
		t.Fatalf("reading the dropped recording: %d samples (header %s), %v; want all %d", len(samples), h.Meta["samples"], err, first.Samples)
	}
	if _, err := rc.Read(make([]byte, 1)); err != io.EOF {
		t.Fatalf("after the last sample: %v, want io.EOF", err)
	}
}

// A subscription too small for the store to keep up loses events; an operation that lost some
// is not recorded (rather than recorded with readings missing). The store is held up, as a slow
// SD card would hold it, once it has taken the tune's start; the service is held at its first
// wait until then, so that the start is not among the events lost.
func TestLostEventsSkipTheRecording(t *testing.T) {
	const depth = 16
	entered, release := make(chan struct{}), make(chan struct{})
	held, waited := false, false
	r := newRig(t, rigOptions{depth: depth,
		onEvent: func(e controller.Event) {
			if held || e.Kind != controller.EventRequest || e.Status.State != controller.RequestRunning {
				return
			}
			held = true
			close(entered)
			<-release
		},
		onSleep: func() {
			if waited {
				return
			}
			waited = true
			select {
			case <-entered:
			case <-time.After(fakeservice.Safety):
				t.Error("the store never saw the tune start")
			}
		},
	})
	st := r.tune(t, f80)
	close(release)
	r.stop()
	if r.sub.Dropped() == 0 {
		t.Fatal("the store's subscription dropped nothing: the test tests nothing")
	}
	// What the subscription kept (the newest events) holds readings of the tune and its end: a
	// store that did not watch Seq would have recorded them as the whole sweep.
	evs := r.events()
	last := slices.IndexFunc(evs, func(e controller.Event) bool {
		return e.Kind == controller.EventRequest && e.Request == st.ID && e.Status.State.Final()
	})
	kept := 0
	for _, e := range evs[max(last-depth+1, 0) : last+1] {
		if e.Kind == controller.EventTune && e.Request == st.ID && e.Tune.Kind == tune.KindReading {
			kept++
		}
	}
	if kept == 0 {
		t.Fatal("no reading among the events the subscription kept: the test tests nothing")
	}
	if l := r.store.List(); len(l) != 0 {
		t.Fatalf("List = %+v: want no recording of an operation that lost events", l)
	}
	if got := files(t, r.dir); len(got) != 0 {
		t.Fatalf("directory holds %v, want nothing", got)
	}
	select {
	case w := <-r.written:
		t.Fatalf("recording %+v written", w)
	default:
	}
}

func TestOptionsRejected(t *testing.T) {
	dir := t.TempDir()
	for _, tc := range []struct {
		name string
		o    sweeps.Options
		says []string
	}{
		{"negative count", sweeps.Options{MaxCount: -1}, []string{"max count -1"}},
		{"negative bytes", sweeps.Options{MaxBytes: -5}, []string{"max bytes -5"}},
		{"own key", sweeps.Options{Meta: map[string]string{"outcome": "x"}}, []string{`"outcome"`}},
		{"bad key", sweeps.Options{Meta: map[string]string{"a b": "x"}}, []string{`"a b"`}},
		{"all at once", sweeps.Options{MaxCount: -1, MaxBytes: -5, Meta: map[string]string{"request": "1"}},
			[]string{"max count", "max bytes", `"request"`}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := sweeps.Open(dir, tc.o)
			if err == nil {
				t.Fatal("Open accepted the options")
			}
			for _, s := range tc.says {
				if !strings.Contains(err.Error(), s) {
					t.Errorf("error %q does not say %q", err, s)
				}
			}
			if !strings.HasPrefix(err.Error(), "sweeps: ") {
				t.Errorf("error %q is not prefixed", err)
			}
		})
	}
}
