package sweeps

import (
	"errors"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/tune"
)

func TestID(t *testing.T) {
	at := time.Date(2026, 1, 2, 15, 4, 5, 999_000_000, time.FixedZone("", 3600))
	for _, tc := range []struct {
		i    id
		text string
	}{
		{newID(at, 123), "20260102T140405Z-000123"}, // UTC, whole seconds
		{newID(at, 0), "20260102T140405Z-000000"},
		{newID(at, 1_234_567), "20260102T140405Z-1234567"},
		{newID(at, 1<<64-1), "20260102T140405Z-18446744073709551615"},
	} {
		if got := tc.i.String(); got != tc.text {
			t.Errorf("String() = %q, want %q", got, tc.text)
		}
		back, err := parseID(tc.text)
		if err != nil || back != tc.i {
			t.Errorf("parseID(%q) = %v, %v; want %v", tc.text, back, err, tc.i)
		}
	}
	for _, bad := range []string{
		"", "-", "20260102T140405Z", "20260102T140405Z-", "20260102T140405Z-12345", "20260102T140405Z-0123456",
		"20260102T140405Z-18446744073709551616", "20260102T140405Z-+12345", "20260102t140405z-000123",
		"20260102T140405-000123", "20260230T140405Z-000123", "20260102T140460Z-000123", "2026-01-02T140405Z-000123",
		"20260102T140405Z-000123.sweep", "../20260102T140405Z-000123", "20260102T140405Z-000123/..",
	} {
		if _, err := parseID(bad); !errors.Is(err, ErrInvalidID) {
			t.Errorf("parseID(%q) = %v, want ErrInvalidID", bad, err)
		}
	}
	a, b, c := newID(at, 7), newID(at, 10), newID(at.Add(time.Second), 1)
	if !a.less(b) || !b.less(c) || c.less(a) || a.less(a) {
		t.Errorf("order of %v, %v, %v wrong", a, b, c)
	}
	for _, tc := range []struct {
		name string
		kind nameKind
	}{
		{"20260102T140405Z-000123.sweep", recordingName},
		{".20260102T140405Z-000123.sweep.tmp-12345", tempName},
		{".20260102T140405Z-000123.sweep.tmp-", foreignName},
		{"20260102T140405Z-000123.sweep.tmp-12345", foreignName},
		{"20260102T140405Z-123.sweep", foreignName},
		{"notes.sweep", foreignName},
		{"20260102T140405Z-000123", foreignName},
		{".sweep", foreignName},
	} {
		if got, _ := classify(tc.name); got != tc.kind {
			t.Errorf("classify(%q) = %d, want %d", tc.name, got, tc.kind)
		}
	}
}

// FuzzParseID: whatever parseID accepts is spelt one way, names no path, and is the name of a
// file in the store's directory only.
func FuzzParseID(f *testing.F) {
	for _, s := range []string{"20260102T150405Z-000123", "../x", "20260102T150405Z-1234567", "20260102T150405Z-0000001"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		i, err := parseID(s)
		if err != nil {
			if !errors.Is(err, ErrInvalidID) {
				t.Fatalf("parseID(%q) = %v, not ErrInvalidID", s, err)
			}
			return
		}
		if i.String() != s {
			t.Fatalf("parseID(%q) gives %q", s, i.String())
		}
		if strings.Trim(s, "0123456789TZ-") != "" || filepath.Base(i.fileName()) != i.fileName() {
			t.Fatalf("accepted %q holds more than digits, T, Z and -", s)
		}
		if k, j := classify(i.fileName()); k != recordingName || j != i {
			t.Fatalf("classify(%q) = %d, %v", i.fileName(), k, j)
		}
	})
}

func TestFrequencyText(t *testing.T) {
	for _, tc := range []struct {
		f    physic.Frequency
		text string
	}{
		{3750 * physic.KiloHertz, "3750000"},
		{3750*physic.KiloHertz + 500*physic.MilliHertz, "3750000.5"},
		{physic.MicroHertz, "0.000001"},
		{14_074_123_456 * physic.MilliHertz, "14074123.456"},
	} {
		if got := formatFrequency(tc.f); got != tc.text {
			t.Errorf("formatFrequency(%d µHz) = %q, want %q", int64(tc.f), got, tc.text)
		}
		if back, ok := parseFrequency(tc.text); !ok || back != tc.f {
			t.Errorf("parseFrequency(%q) = %v, %v; want %v", tc.text, back, ok, tc.f)
		}
	}
	for _, bad := range []string{"", "-1", "x", "NaN", "1e30"} {
		if _, ok := parseFrequency(bad); ok {
			t.Errorf("parseFrequency(%q) accepted", bad)
		}
	}
}

// events builds the stream of one small operation, numbered from first: its start, a sweep up
// with two readings, an approach from above, a reading at rest, and its end.
func events(id controller.RequestID, start time.Time, first uint64) []controller.Event {
	req := controller.Request{Kind: controller.Calibrate, Source: controller.SourceOperator, Freq: 7 * physic.MegaHertz}
	running := controller.RequestStatus{ID: id, Request: req, State: controller.RequestRunning, Started: start}
	res := &tune.Result{Outcome: tune.Calibrated, Freq: req.Freq, Started: start, Finished: start.Add(time.Second), Pos: 990, Backlash: 37}
	done := running
	done.State, done.Finished, done.Result = controller.RequestDone, res.Finished, res
	at := func(ms int) time.Time { return start.Add(time.Duration(ms) * time.Millisecond) }
	tev := func(e tune.Event) controller.Event {
		return controller.Event{Kind: controller.EventTune, Request: id, At: e.At, Tune: &e}
	}
	snap := func(a motion.AxisState) controller.Event {
		return controller.Event{Kind: controller.EventSnapshot, Request: id, Snapshot: &controller.Snapshot{Axis: a}}
	}
	evs := []controller.Event{
		{Kind: controller.EventRequest, Request: id, Status: &running},
		{Kind: controller.EventSnapshot, Request: id, Snapshot: &controller.Snapshot{Axis: motion.AxisState{Backlash: 64, Position: 900, Play: motion.Down}}},
		tev(tune.Event{Kind: tune.KindMove, At: at(1), Pos: 900, Target: 1000, Speed: 500}),
		tev(tune.Event{Kind: tune.KindReading, At: at(2), Pos: 900.4, Gamma2: 0.5, SWR: 5.828, Forward: 5 * physic.Watt, Freq: req.Freq}),
		tev(tune.Event{Kind: tune.KindReading, At: at(4), Pos: 901.6, Gamma2: 0.25, SWR: 3, Forward: 5 * physic.Watt, Freq: req.Freq}),
		// an approach from above: a run-up leg down past the target, then up to it
		tev(tune.Event{Kind: tune.KindMove, At: at(5), Pos: 1000, Target: 990}),
		snap(motion.AxisState{Backlash: 64, Position: 950, Play: motion.Down, Moving: true}),
		snap(motion.AxisState{Backlash: 64, Position: 910, Play: motion.Down}), // between the legs
		snap(motion.AxisState{Backlash: 64, Position: 990, Play: motion.Up}),
		tev(tune.Event{Kind: tune.KindReading, At: at(9), Pos: 990, Gamma2: 0.01, SWR: 1.222, Forward: 5 * physic.Watt, Freq: req.Freq}),
		{Kind: controller.EventRequest, Request: id, Status: &done},
	}
	for i := range evs {
		evs[i].Seq = first + uint64(i)
	}
	return evs
}

// The store records what it saw from an operation's start to its end, and nothing of one whose
// start it did not see or whose events it lost.
func TestConsume(t *testing.T) {
	start := time.Date(2026, 1, 2, 15, 4, 5, 0, time.UTC)
	for _, tc := range []struct {
		name    string
		last    uint64 // the Seq the store has read up to
		stream  func() []controller.Event
		samples int
	}{
		{"whole", 0, func() []controller.Event { return events(5, start, 1) }, 3},
		{"after another whole one", 0, func() []controller.Event {
			return append(events(4, start.Add(-time.Minute), 1), events(5, start, 10)...)
		}, 3},
		{"start not seen", 1, func() []controller.Event { return events(5, start, 1)[1:] }, 0},
		{"a gap", 0, func() []controller.Event {
			e := events(5, start, 1)
			return slices.Delete(e, 4, 5)
		}, 0},
		{"a gap that lost only a snapshot", 0, func() []controller.Event {
			e := events(5, start, 1)
			return slices.Delete(e, 6, 7)
		}, 0},
		{"a gap before the start", 50, func() []controller.Event {
			return events(5, start, 100)
		}, 3},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s, err := Open(t.TempDir(), Options{})
			if err != nil {
				t.Fatal(err)
			}
			s.lastSeq = tc.last
			for _, e := range tc.stream() {
				s.consume(e)
			}
			var got []Info
			for _, i := range s.List() {
				if i.Request == 5 {
					got = append(got, i)
				}
			}
			if tc.samples == 0 {
				if len(got) != 0 {
					t.Fatalf("recorded %+v, want nothing", got)
				}
				return
			}
			if len(got) != 1 {
				t.Fatalf("recorded %+v, want one recording of request 5", s.List())
			}
			_, rc, err := s.Open(got[0].ID)
			if err != nil {
				t.Fatal(err)
			}
			defer rc.Close()
			h, samples, err := record.ReadAll(rc)
			if err != nil {
				t.Fatal(err)
			}
			want := []record.Sample{
				{T: 2 * time.Millisecond, Step: 900, Dir: motion.Up, Freq: 7 * physic.MegaHertz, Forward: 5 * physic.Watt, Reflected: 2500 * physic.MilliWatt, SWR: 5.828},
				{T: 4 * time.Millisecond, Step: 902, Dir: motion.Up, Freq: 7 * physic.MegaHertz, Forward: 5 * physic.Watt, Reflected: 1250 * physic.MilliWatt, SWR: 3},
				{T: 9 * time.Millisecond, Step: 990, Dir: motion.Up, Freq: 7 * physic.MegaHertz, Forward: 5 * physic.Watt, Reflected: 50 * physic.MilliWatt, SWR: 1.222},
			}
			if !slices.Equal(samples, want) {
				t.Fatalf("samples %+v, want %+v", samples, want)
			}
			for k, v := range map[string]string{"kind": "calibrate", "outcome": "calibrated", "measured_backlash_steps": "37",
				"backlash_steps": "64", "final_step": "990", "freq_hz": "7000000", "request_source": "operator", "samples": "3"} {
				if h.Meta[k] != v {
					t.Errorf("metadata %s = %q, want %q", k, h.Meta[k], v)
				}
			}
			if _, ok := h.Meta["verified_swr"]; ok {
				t.Error("a calibration without a verified SWR has one in its header")
			}
			if got[0].ID != "20260102T150405Z-000005" {
				t.Errorf("ID %q", got[0].ID)
			}
		})
	}
}

// A recording whose ID is taken (a restart within the same second numbers its requests from 1
// again) gets the next free number; the one there is not touched.
func TestIDTakenGetsTheNext(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	start := time.Date(2026, 1, 2, 15, 4, 5, 0, time.UTC)
	for _, e := range events(5, start, 1) {
		s.consume(e)
	}
	before, err := os.ReadFile(filepath.Join(dir, "20260102T150405Z-000005.sweep"))
	if err != nil {
		t.Fatal(err)
	}
	s2, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range events(5, start.Add(time.Second/2), 1) {
		s2.consume(e)
	}
	if got := s2.List(); len(got) != 2 || got[0].ID != "20260102T150405Z-000006" || got[0].Request != 5 {
		t.Fatalf("List = %+v, want the second as 20260102T150405Z-000006", got)
	}
	after, err := os.ReadFile(filepath.Join(dir, "20260102T150405Z-000005.sweep"))
	if err != nil || string(after) != string(before) {
		t.Fatalf("the first recording changed (%v)", err)
	}
}
