package bench

import (
	"context"
	"fmt"
	"math"
	"strings"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
)

// playCheck is one backlash calibration against the truth's play.
type playCheck struct {
	name      string
	truth     float64 // the gear's play, steps
	outcome   tune.Outcome
	measured  float64 // Result.Backlash
	up, down  float64 // the fitted centres the note gives
	sigma     float64 // the repeatability the note states
	calibrate bool
}

// calibrateOn calibrates the rig at f (homing first where it has a switch) and reads the note.
func calibrateOn(t *testing.T, r *Rig, f physic.Frequency) playCheck {
	t.Helper()
	ctx := context.Background()
	if !r.Axis.Trusted() {
		if res := r.Tuner.Home(ctx); res.Outcome != tune.Homed {
			t.Fatalf("homing: %s: %v", res.Outcome, res.Err)
		}
	}
	if err := r.Station.Radio.SetFrequency(f); err != nil {
		t.Fatal(err)
	}
	res := r.Tuner.Calibrate(ctx, f)
	c := playCheck{outcome: res.Outcome, measured: float64(res.Backlash), calibrate: res.Outcome == tune.Calibrated}
	if !c.calibrate {
		return c
	}
	for _, n := range res.Notes {
		if i := strings.Index(n, "(up-sweep dip"); i >= 0 {
			if _, err := fmt.Sscanf(n[i:], "(up-sweep dip %g, down-sweep %g, repeatability ±%g)", &c.up, &c.down, &c.sigma); err != nil {
				t.Fatalf("note %q: %v", n, err)
			}
			return c
		}
	}
	t.Fatalf("calibrated without a backlash note: %q", res.Notes)
	return c
}

// judgePlay says what is wrong with a calibration's play, if anything: the stated repeatability
// is a standard error, so the stored play (whole steps: half a step of rounding) must lie within
// three of it of the truth; and the note's centres, given to a tenth of a step, must agree with
// the play stored (a tenth for their rounding, half a step for the stored play's).
func judgePlay(c playCheck) string {
	if !c.calibrate {
		return ""
	}
	if c.sigma <= 0 {
		return fmt.Sprintf("%s: repeatability ±%g stated", c.name, c.sigma)
	}
	if e := math.Abs(c.measured - c.truth); e > 0.5+3*c.sigma {
		return fmt.Sprintf("%s: play %g steps measured against %g true (%.2f from the centres %.1f and %.1f), %.1fσ at the stated ±%.2f",
			c.name, c.measured, c.truth, c.up-c.down, c.up, c.down, (e-0.5)/c.sigma, c.sigma)
	}
	if math.Abs(c.up-c.down-c.measured) > 0.6 {
		return fmt.Sprintf("%s: play %g steps stored, the centres %.1f and %.1f", c.name, c.measured, c.up, c.down)
	}
	return ""
}

// TestCalibratedPlayMatchesTruth calibrates the backlash over the presets with plays from none
// to 400 steps, quiet and noisy converters, and couplers of poor directivity (a leakage that
// makes the dip lopsided), and checks the measured play against the true one, to within its
// stated repeatability: the up and the down sweeps must see the dip alike.
func TestCalibratedPlayMatchesTruth(t *testing.T) {
	freqs := map[string]float64{"default": 3750, "vacuum": 7100, "butterfly": 1850}
	var bad []string
	n := 0
	for _, station := range []string{"default", "vacuum", "butterfly"} {
		for i, b := range []float64{0, 5, 37, 111, 250, 399} {
			for j, noise := range []float64{1, 4} {
				spec, err := sim.Preset(station)
				if err != nil {
					t.Fatal(err)
				}
				spec.Simulator.Seed = uint64(11 + 7*i + j)
				spec.Drive.BacklashSteps = b
				spec.Simulator.Coupler.ADCNoiseMV *= noise
				spec.Simulator.Coupler.DirectivityDB = 18
				spec.Simulator.Coupler.LeakPhaseDeg = float64((50 * (i + 3*j)) % 360)
				r, err := NewRig(RigOptions{Truth: spec, NominalBacklash: 420})
				if err != nil {
					t.Fatal(err)
				}
				c := calibrateOn(t, r, physic.Frequency(freqs[station])*physic.KiloHertz)
				c.name, c.truth = fmt.Sprintf("%s play %g noise ×%g", station, b, noise), b
				if !c.calibrate {
					t.Logf("%s: %s", c.name, c.outcome)
					continue
				}
				n++
				if s := judgePlay(c); s != "" {
					bad = append(bad, s)
				}
			}
		}
	}
	if n < 24 {
		t.Errorf("only %d of 36 calibrations measured the play", n)
	}
	for _, s := range bad {
		t.Error(s)
	}
}

// TestCalibratedPlayMatchesTruthHarsh does the same on the harsh ranges' warm scenarios (their
// first tune is a calibration), two seeds: plays to 400 steps, ten times the converter's noise,
// directivity down to 17 dB, lost steps, the weather.
func TestCalibratedPlayMatchesTruthHarsh(t *testing.T) {
	var bad []string
	n, total, off := 0, 0, 0
	sum2 := 0.0
	for _, seed := range []uint64{1, 7} {
		for _, sc := range harshScenarios(t, 120, seed, Warm) {
			if len(sc.History) == 0 {
				continue
			}
			total++
			r, err := NewRig(scenarioRig(sc))
			if err != nil {
				t.Fatal(err)
			}
			v := sc.History[0]
			r.Clock.Advance(v.At.Sub(r.Clock.Now()))
			c := calibrateOn(t, r, v.Freq)
			c.name, c.truth = fmt.Sprintf("seed %d scenario %d (%s)", seed, sc.ID, sc.Base), sc.Truth.Drive.BacklashSteps
			if !c.calibrate {
				continue
			}
			n++
			sum2 += (c.up - c.down - c.truth) * (c.up - c.down - c.truth)
			if c.measured != c.truth {
				off++
			}
			if s := judgePlay(c); s != "" {
				bad = append(bad, s)
			}
		}
	}
	if n > 0 {
		t.Logf("the play off the truth by %.2f steps rms (from the centres), %d of %d stored off by a step or more", math.Sqrt(sum2/float64(n)), off, n)
	}
	if n < total/2 {
		t.Errorf("only %d of %d calibrations measured the play", n, total)
	}
	t.Logf("%d of %d calibrations measured the play", n, total)
	for _, s := range bad {
		t.Error(s)
	}
}
