package fakeloop_test

import (
	"context"
	"math"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
)

// newTuner is a bare tuner on a fake loop, its axis untrusted if the loop has a home switch.
func newTuner(t *testing.T, o fakeloop.Options, to tune.Options) (*fakeloop.Loop, *motion.Axis, *tune.Tuner) {
	t.Helper()
	l, err := fakeloop.New(o)
	if err != nil {
		t.Fatal(err)
	}
	ax := fakeservice.NewAxis(t, l, l.Home != nil)
	m, err := memmap.New(memmap.Options{Prior: l.Prior})
	if err != nil {
		t.Fatal(err)
	}
	tn, err := tune.New(fakeservice.TunerDeps(l, ax, m), fakeservice.TuneOptions(l, to))
	if err != nil {
		t.Fatal(err)
	}
	return l, ax, tn
}

// The tuner tunes the fake loop on each band it covers, to within a step or two of the dip,
// with the carrier off afterwards.
func TestTunerTunesTheFakeLoop(t *testing.T) {
	l, ax, tn := newTuner(t, fakeloop.Options{}, tune.Options{})
	for _, f := range []physic.Frequency{3750 * physic.KiloHertz, 1850 * physic.KiloHertz, 7100 * physic.KiloHertz, 3600 * physic.KiloHertz} {
		l.Radio.SetFrequency(f)
		res := tn.Tune(context.Background(), tune.Request{Freq: f, RF: true})
		if res.Outcome != tune.Tuned {
			t.Fatalf("tune at %v: %s (%v)", f, res.Outcome, res.Err)
		}
		// Within a quarter of the dip's half-width and two steps: the final approach still
		// carries up to half the difference between the nominal and the true play (from memory
		// of the simulator's figures).
		if d := math.Abs(float64(ax.Position()) - l.Dip(f)); d > 0.25*l.HalfWidth(f)+2+float64(fakeservice.Nominal-40)/2 {
			t.Errorf("tune at %v ended at %d, the dip is at %.1f (half-width %.1f)", f, ax.Position(), l.Dip(f), l.HalfWidth(f))
		}
		if res.SWR > 2 || l.Radio.Transmitting() {
			t.Errorf("tune at %v: SWR %.2f (want at most the default target 2), carrier on %v", f, res.SWR, l.Radio.Transmitting())
		}
	}
}

// A calibration measures the fake's true play, 40 steps, to within a few steps.
func TestCalibrationMeasuresThePlay(t *testing.T) {
	l, _, tn := newTuner(t, fakeloop.Options{}, tune.Options{})
	f := 3750 * physic.KiloHertz
	l.Radio.SetFrequency(f)
	res := tn.Calibrate(context.Background(), f)
	if res.Outcome != tune.Calibrated {
		t.Fatalf("calibrate: %s (%v)", res.Outcome, res.Err)
	}
	// Within 3 steps of the 40 built in: a few tenths of the 17-step half-width (from memory).
	if res.Backlash < 37 || res.Backlash > 43 {
		t.Fatalf("backlash %d, the fake's play is 40", res.Backlash)
	}
}

// With a home switch and the position unknown, a tune homes first, and the home position agrees
// with the motor's own count to within the slow approach's resolution.
func TestHomingFindsTheSwitch(t *testing.T) {
	l, ax, tn := newTuner(t, fakeloop.Options{HomeSwitch: true}, tune.Options{})
	res := tn.Home(context.Background())
	if res.Outcome != tune.Homed {
		t.Fatalf("home: %s (%v)", res.Outcome, res.Err)
	}
	// 200 steps/s slow approach polled every 2 ms: under a step of error, plus the ramped
	// stop's few steps (from the axis options).
	if d := ax.Position() - l.Drive.Motor(); d < -4 || d > 4 {
		t.Fatalf("homed axis at %d, motor at %d", ax.Position(), l.Drive.Motor())
	}
}

// The readings are the same for the same seed and differ for another.
func TestReadingsAreSeeded(t *testing.T) {
	read := func(seed uint64) []physic.Power {
		l, err := fakeloop.New(fakeloop.Options{Seed: seed})
		if err != nil {
			t.Fatal(err)
		}
		if err := l.Radio.Key(context.Background(), 5*physic.Watt); err != nil {
			t.Fatal(err)
		}
		var out []physic.Power
		for range 5 {
			r, err := l.Sensor.Read(context.Background())
			if err != nil {
				t.Fatal(err)
			}
			out = append(out, r.Reflected)
		}
		return out
	}
	a, b, c := read(7), read(7), read(8)
	same := func(x, y []physic.Power) bool {
		for i := range x {
			if x[i] != y[i] {
				return false
			}
		}
		return true
	}
	if !same(a, b) || same(a, c) {
		t.Fatalf("seed 7 twice: %v, %v; seed 8: %v", a, b, c)
	}
}
