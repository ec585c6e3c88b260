package replay_test

import (
	"bytes"
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/sim/replay"
	"github.com/tankd/tankd/sim/vclock"
)

var (
	_ motion.Drive = (*replay.Replay)(nil)
	_ sense.Sensor = (*replay.Replay)(nil)
)

const band80 = 3750 * physic.KiloHertz

// Motion limits for the test moves: a few kHz of microsteps is common practice for a userspace
// pulse generator.
const (
	speed = 2000.0  // steps/s
	accel = 20000.0 // steps/s²
)

func newReplay(t *testing.T, s []record.Sample, o replay.Options) (*replay.Replay, *vclock.Clock) {
	t.Helper()
	clk := vclock.New(vclock.Epoch)
	r, err := replay.New(clk, s, o)
	if err != nil {
		t.Fatal(err)
	}
	return r, clk
}

func read(t *testing.T, r *replay.Replay) sense.Reading {
	t.Helper()
	got, err := r.Read(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	return got
}

func plan(t *testing.T, n int64) motion.Profile {
	t.Helper()
	p, err := motion.Plan(n, speed, accel)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// moveBy runs a whole move of n steps (negative: down) and checks that the drive reports it
// finished with every pulse emitted.
func moveBy(t *testing.T, r *replay.Replay, clk *vclock.Clock, n int64) {
	t.Helper()
	d, abs := motion.Up, n
	if n < 0 {
		d, abs = motion.Down, -n
	}
	p := plan(t, abs)
	before := r.Position()
	if err := r.Start(motion.Move{Dir: d, Profile: p}); err != nil {
		t.Fatal(err)
	}
	clk.Advance(p.Duration())
	if emitted, running := r.Progress(); emitted != abs || running {
		t.Fatalf("after the planned duration: %d pulses emitted, running %v; want %d, false", emitted, running, abs)
	}
	if got := r.Position(); got != before+n {
		t.Fatalf("position %d after moving %d from %d", got, n, before)
	}
}

// sample is a recorded reading at a constant 5 W forward.
func sample(step motion.Steps, d motion.Direction, ref physic.Power) record.Sample {
	fwd := 5 * physic.Watt
	return record.Sample{Step: step, Dir: d, Freq: band80, Forward: fwd, Reflected: ref,
		SWR: sense.Reading{Forward: fwd, Reflected: ref}.SWR()}
}

// dipSweep synthesises one pass across a dip at a constant 5 W: |Γ|² = u²/(1+u²) with
// u = (shaft − centre)/halfWidth, the reflection of a single resonance matched at its centre.
// The shaft lags the motor by half the play in the direction of travel. The loop is made up; the
// tests below rely only on where its dip lies, not on its shape.
func dipSweep(from, to motion.Steps, play, centre, halfWidth motion.Steps) []record.Sample {
	d := motion.Up
	if to < from {
		d = motion.Down
	}
	var out []record.Sample
	for step := from; ; step += motion.Steps(d) {
		shaft := float64(step) - float64(d)*float64(play)/2
		u := (shaft - float64(centre)) / float64(halfWidth)
		g2 := u * u / (1 + u*u)
		s := sample(step, d, physic.Power(math.Round(g2*float64(5*physic.Watt))))
		s.T = time.Duration(len(out)) * time.Millisecond
		out = append(out, s)
		if step == to {
			return out
		}
	}
}

func find(t *testing.T, s []record.Sample, step motion.Steps, d motion.Direction) record.Sample {
	t.Helper()
	for _, x := range s {
		if x.Step == step && x.Dir == d {
			return x
		}
	}
	t.Fatalf("no sample at step %d travelling %v", step, d)
	return record.Sample{}
}

func near(got, want physic.Power) bool { return got-want <= 1 && want-got <= 1 }

func TestInterpolatesForwardAndGamma2(t *testing.T) {
	w := physic.Watt
	rec := []record.Sample{
		{Step: 100, Dir: motion.Up, Freq: band80, Forward: 4 * w, Reflected: 1 * w, SWR: 3},
		{Step: 110, Dir: motion.Up, Freq: band80, Forward: 6 * w, Reflected: 60 * physic.MilliWatt, SWR: 1.2222},
		// Two samples at one step are averaged: |Γ|² 0.1 and 0.3 give 0.2.
		{Step: 120, Dir: motion.Up, Freq: band80, Forward: 5 * w, Reflected: 500 * physic.MilliWatt, SWR: 1.9245},
		{Step: 120, Dir: motion.Up, Freq: band80, Forward: 5 * w, Reflected: 1500 * physic.MilliWatt, SWR: 3.4415},
		// No forward power: carries no match information and must not pull the average.
		{Step: 120, Dir: motion.Up, Freq: band80, SWR: math.NaN()},
	}
	// Hand-computed by linear interpolation of forward power and |Γ|² = ref/fwd between the
	// neighbours, reflected = |Γ|²·forward; rounding to the nanowatt allows ±1 nW.
	for _, tc := range []struct {
		step     motion.Steps
		fwd, ref physic.Power
	}{
		{100, 4 * w, 1 * w}, // a recorded step as it is
		{104, 4800 * physic.MilliWatt, 739200 * physic.MicroWatt}, // w=0.4: 4.8 W, |Γ|² 0.154
		{110, 6 * w, 60 * physic.MilliWatt},
		{115, 5500 * physic.MilliWatt, 577500 * physic.MicroWatt}, // w=0.5: 5.5 W, |Γ|² 0.105
		{119, 5100 * physic.MilliWatt, 923100 * physic.MicroWatt}, // w=0.9: 5.1 W, |Γ|² 0.181
		{120, 5 * w, 1 * w}, // the average, |Γ|² 0.2
	} {
		r, _ := newReplay(t, rec, replay.Options{Position: tc.step})
		got := read(t, r)
		if !near(got.Forward, tc.fwd) || !near(got.Reflected, tc.ref) {
			t.Errorf("step %d: forward %v, reflected %v; want %v, %v", tc.step, got.Forward, got.Reflected, tc.fwd, tc.ref)
		}
	}
}

func TestReadingFollowsTheDirectionOfTravel(t *testing.T) {
	const play, centre = 40, 1000
	rec := append(dipSweep(900, 1100, play, centre, 10), dipSweep(1100, 900, play, centre, 10)...)
	// Silent: the recording's own readings, exactly, with no noise on them.
	r, clk := newReplay(t, rec, replay.Options{Position: 900, Silent: true})
	if err := r.Enable(true); err != nil {
		t.Fatal(err)
	}
	check := func(d motion.Direction) {
		t.Helper()
		want := find(t, rec, r.Position(), d)
		if got := read(t, r); got.Forward != want.Forward || got.Reflected != want.Reflected {
			t.Fatalf("at %d after moving %v: forward %v reflected %v, want the %v sweep's %v, %v",
				r.Position(), d, got.Forward, got.Reflected, d, want.Forward, want.Reflected)
		}
	}
	moveBy(t, r, clk, 110) // 1010 going up
	check(motion.Up)
	moveBy(t, r, clk, 30)
	moveBy(t, r, clk, -30) // 1010 again, going down
	check(motion.Down)
	moveBy(t, r, clk, 5)
	moveBy(t, r, clk, -5)
	moveBy(t, r, clk, 5) // 1015 going up after a reversal
	check(motion.Up)
	// The two sweeps see different matches at 1010; otherwise this test could not fail.
	if find(t, rec, 1010, motion.Up).Reflected == find(t, rec, 1010, motion.Down).Reflected {
		t.Fatal("the synthetic sweeps agree at step 1010")
	}
}

// A search that steps across the dip finds it where the recording saw it in that direction: the
// synthetic sweeps put it at centre ± play/2, the two being the play apart.
func TestSteppedSearchSeesTheBacklash(t *testing.T) {
	const play, centre = 40, 1000
	rec := append(dipSweep(900, 1100, play, centre, 10), dipSweep(1100, 900, play, centre, 10)...)
	r, clk := newReplay(t, rec, replay.Options{Position: 940, Dir: motion.Down})
	if err := r.Enable(true); err != nil {
		t.Fatal(err)
	}
	search := func(n int, d int64) motion.Steps {
		best, bestAt := physic.Power(math.MaxInt64), motion.Steps(0)
		for range n {
			moveBy(t, r, clk, d)
			if got := read(t, r); got.Reflected < best {
				best, bestAt = got.Reflected, r.Position()
			}
		}
		return bestAt
	}
	if got := search(140, 1); got != centre+play/2 {
		t.Errorf("dip going up at %d, want %d", got, centre+play/2)
	}
	if got := search(140, -1); got != centre-play/2 {
		t.Errorf("dip going down at %d, want %d", got, centre-play/2)
	}
}

func TestMoveWithoutPulsesKeepsTheDirection(t *testing.T) {
	rec := append(dipSweep(900, 1100, 40, 1000, 10), dipSweep(1100, 900, 40, 1000, 10)...)
	r, clk := newReplay(t, rec, replay.Options{Position: 990, Silent: true})
	if err := r.Enable(true); err != nil {
		t.Fatal(err)
	}
	moveBy(t, r, clk, 20)
	if err := r.Start(motion.Move{Dir: motion.Down, Profile: plan(t, 50)}); err != nil {
		t.Fatal(err)
	}
	r.Stop(false) // before the first pulse: the gear play is where the up move left it
	want := find(t, rec, 1010, motion.Up)
	if got := read(t, r); r.Position() != 1010 || got.Reflected != want.Reflected {
		t.Fatalf("at %d: reflected %v, want the up sweep's %v at 1010", r.Position(), got.Reflected, want.Reflected)
	}
}

func TestNoData(t *testing.T) {
	up := dipSweep(900, 1100, 40, 1000, 10)
	for _, tc := range []struct {
		name string
		o    replay.Options
		text string
	}{
		{"below the span", replay.Options{Position: 899}, "outside the recorded steps 900 to 1100"},
		{"above the span", replay.Options{Position: 1101}, "outside the recorded steps 900 to 1100"},
		{"direction never recorded", replay.Options{Position: 1000, Dir: motion.Down}, "never recorded in this direction"},
		{"fallback shifted out of the span", replay.Options{Position: 1080, Dir: motion.Down, Fallback: true, Backlash: 40}, "never recorded"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r, _ := newReplay(t, up, tc.o)
			_, err := r.Read(context.Background())
			if !errors.Is(err, replay.ErrNoData) || !strings.Contains(err.Error(), tc.text) {
				t.Fatalf("Read = %v, want ErrNoData saying %q", err, tc.text)
			}
			if !strings.HasPrefix(err.Error(), "replay: read at step ") {
				t.Fatalf("error %q does not say where it read", err)
			}
		})
	}
}

func TestFallbackUsesTheOtherDirectionShifted(t *testing.T) {
	const play = 40
	up := dipSweep(900, 1100, play, 1000, 10)
	// Travelling down at p the shaft stands where it stood going up at p + play.
	for _, tc := range []struct {
		name string
		rec  []record.Sample
	}{
		{"direction never recorded", up},
		{"outside that direction's span", append(up, dipSweep(950, 900, play, 1000, 10)...)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r, _ := newReplay(t, tc.rec, replay.Options{Position: 1000, Dir: motion.Down, Fallback: true, Backlash: play, Silent: true})
			want := find(t, up, 1000+play, motion.Up)
			if got := read(t, r); got.Reflected != want.Reflected || got.Forward != want.Forward {
				t.Fatalf("reflected %v, want the up sweep's %v at %d", got.Reflected, want.Reflected, 1000+play)
			}
		})
	}
	// Where the direction has data of its own, the fallback stays out of it.
	both := append(dipSweep(900, 1100, play, 1000, 10), dipSweep(1100, 900, play, 1000, 10)...)
	r, _ := newReplay(t, both, replay.Options{Position: 1010, Dir: motion.Down, Fallback: true, Backlash: 5, Silent: true})
	if got, want := read(t, r), find(t, both, 1010, motion.Down); got.Reflected != want.Reflected {
		t.Fatalf("reflected %v, want the down sweep's own %v", got.Reflected, want.Reflected)
	}
}

func TestFrequencyChoice(t *testing.T) {
	at := func(f physic.Frequency, ref physic.Power) record.Sample {
		s := sample(0, motion.Up, ref)
		s.Freq = f
		return s
	}
	rec := []record.Sample{at(7*physic.MegaHertz, 1*physic.Watt), at(band80, 2*physic.Watt),
		at(band80, 2*physic.Watt), at(7*physic.MegaHertz, 1*physic.Watt), at(band80, 2*physic.Watt)}
	for _, tc := range []struct {
		name string
		rec  []record.Sample
		opt  physic.Frequency
		want physic.Frequency
		ref  physic.Power
	}{
		{"most common", rec, 0, band80, 2 * physic.Watt},
		{"chosen", rec, 7 * physic.MegaHertz, 7 * physic.MegaHertz, 1 * physic.Watt},
		{"tie goes to the lowest", rec[:4], 0, band80, 2 * physic.Watt},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r, _ := newReplay(t, tc.rec, replay.Options{Freq: tc.opt})
			if r.Frequency() != tc.want {
				t.Fatalf("replays %v, want %v", r.Frequency(), tc.want)
			}
			if got := read(t, r); got.Reflected != tc.ref {
				t.Fatalf("reflected %v, want %v from the samples at %v", got.Reflected, tc.ref, tc.want)
			}
		})
	}
}

func TestCarrier(t *testing.T) {
	r, _ := newReplay(t, dipSweep(900, 1100, 40, 1000, 10), replay.Options{Position: 2000, CarrierOff: true})
	// Without a carrier the coupler reads nothing anywhere, even where nothing was recorded.
	if got := read(t, r); got.Forward != 0 || got.Reflected != 0 {
		t.Fatalf("carrier off: forward %v, reflected %v; want zero", got.Forward, got.Reflected)
	}
	r.Carrier(true)
	if _, err := r.Read(context.Background()); !errors.Is(err, replay.ErrNoData) {
		t.Fatalf("carrier on outside the span: %v, want ErrNoData", err)
	}
	r2, _ := newReplay(t, dipSweep(900, 1100, 40, 1000, 10), replay.Options{Position: 1000})
	r2.Carrier(false)
	if got := read(t, r2); got.Forward != 0 || got.Reflected != 0 {
		t.Fatalf("carrier switched off: forward %v, reflected %v; want zero", got.Forward, got.Reflected)
	}
}

func TestNewRejects(t *testing.T) {
	good := dipSweep(900, 910, 0, 905, 10)
	noDir := append([]record.Sample{}, good...)
	noDir[3].Dir = 0
	silent := []record.Sample{{Dir: motion.Up, Freq: band80, SWR: math.NaN()}}
	for _, tc := range []struct {
		name string
		rec  []record.Sample
		o    replay.Options
		is   error
		text string
	}{
		{"no samples", nil, replay.Options{}, replay.ErrNoData, "no samples"},
		{"frequency not recorded", good, replay.Options{Freq: 7 * physic.MegaHertz}, replay.ErrNoData, "no samples at 7MHz"},
		{"no forward power", silent, replay.Options{}, replay.ErrNoData, "no samples with forward power"},
		{"sample without direction", noDir, replay.Options{}, nil, "sample 3: direction 0"},
		{"negative conversion", good, replay.Options{Conversion: -1}, nil, "conversion"},
		{"bad direction", good, replay.Options{Dir: 3}, nil, "dir 3"},
		{"negative backlash", good, replay.Options{Backlash: -1}, nil, "backlash -1"},
		{"negative frequency", good, replay.Options{Freq: -1}, nil, "freq"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := replay.New(vclock.New(vclock.Epoch), tc.rec, tc.o)
			if err == nil || tc.is != nil && !errors.Is(err, tc.is) || !strings.Contains(err.Error(), tc.text) {
				t.Fatalf("New = %v, want an error saying %q (wrapping %v)", err, tc.text, tc.is)
			}
		})
	}
}

func TestDriveBookkeeping(t *testing.T) {
	r, clk := newReplay(t, dipSweep(900, 1100, 0, 1000, 10), replay.Options{Position: 1000})
	p := plan(t, 400)
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: p}); !errors.Is(err, replay.ErrDisabled) {
		t.Fatalf("Start while disabled = %v, want ErrDisabled", err)
	}
	if err := r.Enable(true); err != nil {
		t.Fatal(err)
	}
	if err := r.Start(motion.Move{Profile: p}); err == nil {
		t.Fatal("Start without a direction succeeded")
	}
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: motion.Profile{Steps: 10}}); !errors.Is(err, motion.ErrBadProfile) {
		t.Fatalf("Start with an unplanned profile = %v, want ErrBadProfile", err)
	}
	r.Stop(false) // nothing running: nothing happens
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: p}); err != nil {
		t.Fatal(err)
	}
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: p}); !errors.Is(err, replay.ErrBusy) {
		t.Fatalf("Start during a move = %v, want ErrBusy", err)
	}
	// The pulses follow the profile's schedule on the clock.
	for _, frac := range []int64{1, 3, 5, 9} {
		clk.Advance(p.Duration()*time.Duration(frac)/10 - clk.Since(vclock.Epoch))
		at := clk.Since(vclock.Epoch)
		emitted, running := r.Progress()
		if emitted != p.StepsAt(at) || !running {
			t.Fatalf("at %v: %d emitted, running %v; want %d, true", at, emitted, running, p.StepsAt(at))
		}
		if got := r.Position(); got != 1000+emitted {
			t.Fatalf("position %d with %d emitted from 1000", got, emitted)
		}
	}
	// A fault stop freezes the count at once.
	r.Stop(false)
	frozen, _ := r.Progress()
	clk.Advance(time.Second)
	if emitted, running := r.Progress(); emitted != frozen || running || r.Position() != 1000+frozen {
		t.Fatalf("after Stop(false): %d emitted, running %v, position %d; want %d, false, %d",
			emitted, running, r.Position(), frozen, 1000+frozen)
	}
	// A ramped stop ends the move as the profile's StopAt plans it.
	base := r.Position()
	if err := r.Start(motion.Move{Dir: motion.Down, Profile: p}); err != nil {
		t.Fatal(err)
	}
	half := p.Duration() / 2
	clk.Advance(half)
	r.Stop(true)
	stopped := p.StopAt(half)
	if ramp := stopped.Duration() - half; ramp > 1 {
		clk.Advance(ramp - 1)
		if _, running := r.Progress(); !running {
			t.Fatal("the ramped stop ended before its deceleration did")
		}
	}
	clk.Advance(time.Second)
	if emitted, running := r.Progress(); emitted != stopped.Total() || running {
		t.Fatalf("after a ramped stop: %d emitted, running %v; want %d, false", emitted, running, stopped.Total())
	}
	if stopped.Total() >= p.Total() {
		t.Fatalf("the ramped stop emitted %d of %d: it did not stop early", stopped.Total(), p.Total())
	}
	if got := r.Position(); got != base-stopped.Total() {
		t.Fatalf("position %d, want %d", got, base-stopped.Total())
	}
	// Releasing the motor stops a move at once, and a released motor does not start.
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: p}); err != nil {
		t.Fatal(err)
	}
	clk.Advance(p.Duration() / 4)
	if err := r.Enable(false); err != nil {
		t.Fatal(err)
	}
	frozen, _ = r.Progress()
	clk.Advance(p.Duration())
	if emitted, running := r.Progress(); emitted != frozen || running {
		t.Fatalf("after Enable(false): %d emitted, running %v; want %d, false", emitted, running, frozen)
	}
	// Halt does the same and leaves the motor released.
	if err := r.Enable(true); err != nil {
		t.Fatal(err)
	}
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: p}); err != nil {
		t.Fatal(err)
	}
	clk.Advance(p.Duration() / 4)
	if err := r.Halt(); err != nil {
		t.Fatal(err)
	}
	frozen, _ = r.Progress()
	clk.Advance(p.Duration())
	if emitted, running := r.Progress(); emitted != frozen || running {
		t.Fatalf("after Halt: %d emitted, running %v; want %d, false", emitted, running, frozen)
	}
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: p}); !errors.Is(err, replay.ErrDisabled) {
		t.Fatalf("Start after Halt = %v, want ErrDisabled", err)
	}
	if r.String() != "replay" {
		t.Fatalf("String() = %q, want the default name", r.String())
	}
}

func TestReadTakesOneConversion(t *testing.T) {
	const conv = 4 * time.Millisecond
	r, clk := newReplay(t, dipSweep(900, 1100, 0, 1000, 10), replay.Options{Position: 1000, Conversion: conv})
	got := read(t, r)
	if el := clk.Since(vclock.Epoch); el != conv {
		t.Fatalf("Read took %v on the clock, want %v", el, conv)
	}
	// sense.Reading.At is the middle of the conversion.
	if !got.At.Equal(vclock.Epoch.Add(conv / 2)) {
		t.Fatalf("At = %v, want the conversion's middle %v", got.At, vclock.Epoch.Add(conv/2))
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := r.Read(ctx); !errors.Is(err, context.Canceled) {
		t.Fatalf("Read with an ended context = %v, want context.Canceled", err)
	}
	if el := clk.Since(vclock.Epoch); el != conv {
		t.Fatalf("a cancelled Read moved the clock to %v", el)
	}
	r2, clk2 := newReplay(t, dipSweep(900, 1100, 0, 1000, 10), replay.Options{Position: 1000})
	read(t, r2)
	if el := clk2.Since(vclock.Epoch); el != replay.DefaultConversion {
		t.Fatalf("default Read took %v, want %v", el, replay.DefaultConversion)
	}
}

// During a move, a reading reports the position in the middle of its conversion. Forward power
// recorded in proportion to the step makes that position readable from the reading itself.
func TestReadDuringAMove(t *testing.T) {
	var rec []record.Sample
	for step := motion.Steps(0); step <= 2000; step += 10 {
		rec = append(rec, record.Sample{Step: step, Dir: motion.Up, Freq: band80,
			Forward: physic.Power(step+1) * physic.MilliWatt, SWR: 1})
	}
	const conv = 10 * time.Millisecond
	r, clk := newReplay(t, rec, replay.Options{Conversion: conv})
	if err := r.Enable(true); err != nil {
		t.Fatal(err)
	}
	p := plan(t, 1500)
	if err := r.Start(motion.Move{Dir: motion.Up, Profile: p}); err != nil {
		t.Fatal(err)
	}
	for clk.Since(vclock.Epoch) < p.Duration() {
		mid := clk.Since(vclock.Epoch) + conv/2
		got := read(t, r)
		want := physic.Power(p.StepsAt(mid)+1) * physic.MilliWatt
		if !near(got.Forward, want) || got.Reflected != 0 {
			t.Fatalf("read over %v..%v: forward %v, want %v (step %d at the middle)",
				mid-conv/2, mid+conv/2, got.Forward, want, p.StepsAt(mid))
		}
	}
}

// The replay takes its samples from a recording file as the record package writes and reads it.
func TestReplaysARecordingFile(t *testing.T) {
	rec := append(dipSweep(900, 1100, 40, 1000, 10), dipSweep(1100, 900, 40, 1000, 10)...)
	for i := range rec {
		rec[i].T = time.Duration(i) * time.Millisecond // one pass after the other
	}
	var file bytes.Buffer
	w, err := record.NewWriter(&file, record.Header{Start: vclock.Epoch, Meta: map[string]string{"source": "test"}})
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range rec {
		if err := w.Write(s); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
	_, back, err := record.ReadAll(&file)
	if err != nil {
		t.Fatal(err)
	}
	for _, d := range []motion.Direction{motion.Up, motion.Down} {
		r, _ := newReplay(t, back, replay.Options{Position: 1010, Dir: d, Silent: true})
		if got, want := read(t, r), find(t, rec, 1010, d); got.Reflected != want.Reflected {
			t.Fatalf("travelling %v: reflected %v, want %v", d, got.Reflected, want.Reflected)
		}
	}
}

func TestHoldEnds(t *testing.T) {
	clk := vclock.New(vclock.Epoch)
	samples := []record.Sample{
		{Step: 10, Dir: motion.Up, Freq: 3500000 * physic.Hertz, Forward: 5 * physic.Watt, Reflected: 4 * physic.Watt, SWR: 17.9},
		{Step: 20, Dir: motion.Up, Freq: 3500000 * physic.Hertz, Forward: 5 * physic.Watt, Reflected: 3 * physic.Watt, SWR: 7.9},
	}
	r, err := replay.New(clk, samples, replay.Options{Position: 5, HoldEnds: true})
	if err != nil {
		t.Fatal(err)
	}
	if err := r.Enable(true); err != nil {
		t.Fatal(err)
	}
	rd, err := r.Read(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	// below the recorded span: the lower end's |Γ|² = 4/5
	if g := rd.Gamma2(); math.Abs(g-0.8) > 1e-6 {
		t.Errorf("|Γ|² %g below the span, want the end's 0.8", g)
	}
}
