package bench

import (
	"context"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/sim"
)

// weakMotorVacuum is the vacuum preset between its hard stops without its home switch, driven by
// a motor whose pull-out speed (6,000 steps/s) is half the planned top speed (12,000): every
// pulse of a move's cruise has an even chance of being lost (mech's default OverLimitLoss), and
// the controller, counting pulses, cannot tell.
func weakMotorVacuum(t *testing.T) sim.Spec {
	t.Helper()
	s, err := sim.Preset("vacuum")
	if err != nil {
		t.Fatal(err)
	}
	s.Drive.Home = nil
	s.Simulator.Drive.PulloutSpeed = s.Drive.MaxSpeed / 2
	return s
}

// TestTrueShaftSeesLostSteps: an operator keeps asking for 3.6 MHz on a station whose motor
// loses steps at the planned speed. Each whole-travel scan ends at the lower soft limit by the
// controller's count, with the true motor lower each time, until the shaft sits against the
// lower hard stop. The controller's own coordinates never leave the soft limits; the true shaft
// does, and the motor stalls against the stop.
func TestTrueShaftSeesLostSteps(t *testing.T) {
	r, err := NewRig(RigOptions{Truth: weakMotorVacuum(t)})
	if err != nil {
		t.Fatal(err)
	}
	for range 5 {
		res, err := r.Tune(context.Background(), 3600*physic.KiloHertz, true)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("%s: axis %d, true motor %d, shaft %.0f; %d crossings, %d stalled pulses, %d in the controller's coordinates",
			res.Outcome, r.Axis.Position(), r.Station.Mech.MotorPosition(), r.Station.Mech.Shaft(),
			r.LimitViolations(), r.Stalls(), r.ControllerLimitViolations())
	}
	lo, _ := r.Axis.SoftLimits()
	if m := r.Station.Mech.MotorPosition(); m >= lo {
		t.Fatalf("the true motor is at %d, inside the lower soft limit %d: the lost steps did not walk it out", m, lo)
	}
	if n := r.ControllerLimitViolations(); n != 0 {
		t.Errorf("%d crossings in the controller's coordinates: its bookkeeping left the soft limits, which it never should", n)
	}
	if r.LimitViolations() == 0 {
		t.Error("no soft-limit crossing counted on the true shaft, which went past the lower limit")
	}
	if r.Stalls() == 0 || r.Station.Mech.Stalls() == 0 {
		t.Errorf("%d stalled pulses in %d moves: the motor drove the shaft into the lower stop", r.Stalls(), r.Station.Mech.Stalls())
	}
}

// TestCalmPathCountsNothing: on every preset (homing included, whose legs run outside the soft
// limits by design), and on the weak-motor station's geometry with a motor that keeps up, the
// usual operations cross no soft limit and stall nowhere, counted either way.
func TestCalmPathCountsNothing(t *testing.T) {
	for _, station := range []string{"default", "vacuum", "butterfly"} {
		spec, _ := sim.Preset(station)
		r, err := NewRig(RigOptions{Truth: spec})
		if err != nil {
			t.Fatal(err)
		}
		ctx := context.Background()
		for _, op := range jitterPlans[station] {
			f := physic.Frequency(op.khz) * physic.KiloHertz
			switch op.kind {
			case "home":
				r.Tuner.Home(ctx)
			case "calibrate":
				if err := r.Station.Radio.SetFrequency(f); err != nil {
					t.Fatal(err)
				}
				r.Tuner.Calibrate(ctx, f)
			default:
				if _, err := r.Tune(ctx, f, true); err != nil {
					t.Fatal(err)
				}
			}
		}
		if a, b, c := r.LimitViolations(), r.Stalls(), r.ControllerLimitViolations(); a+int(b)+c != 0 {
			t.Errorf("%s: %d crossings, %d stalled pulses, %d crossings in the controller's coordinates", station, a, b, c)
		}
	}
	spec := weakMotorVacuum(t)
	spec.Simulator.Drive.PulloutSpeed = 1.5 * spec.Drive.MaxSpeed
	r, err := NewRig(RigOptions{Truth: spec})
	if err != nil {
		t.Fatal(err)
	}
	for range 5 {
		if _, err := r.Tune(context.Background(), 3600*physic.KiloHertz, true); err != nil {
			t.Fatal(err)
		}
	}
	if a, b, c := r.LimitViolations(), r.Stalls(), r.ControllerLimitViolations(); a+int(b)+c != 0 {
		t.Errorf("a motor that keeps up: %d crossings, %d stalled pulses, %d crossings in the controller's coordinates", a, b, c)
	}
}

// TestCrossingToleratesThePlay: the shaft may lie past a soft limit by the gear play (and the
// settling ring, and a step), no further. The default station's play is 40 steps and its ring
// 1.5, so the tolerance is 42.5 steps.
func TestCrossingToleratesThePlay(t *testing.T) {
	for _, c := range []struct {
		slip  int64
		count int
	}{
		{-130, 0}, // 20 steps past the limit at the end of the next move: within the play
		{-200, 1}, // 90 steps past: beyond anything the play explains
	} {
		spec := sim.DefaultSpec()
		r, err := NewRig(RigOptions{Truth: spec})
		if err != nil {
			t.Fatal(err)
		}
		ctx := context.Background()
		lo, _ := r.Axis.SoftLimits()
		// An approach from below leaves the shaft half the play behind the motor, where the
		// soft limits' convention puts it.
		if err := r.Axis.Approach(ctx, lo+100); err != nil {
			t.Fatal(err)
		}
		r.Station.Mech.Slip(c.slip)
		if err := r.Axis.MoveTo(ctx, lo+110, 0); err != nil {
			t.Fatal(err)
		}
		// The shaft in motor steps, as the soft limits count them: half the play added.
		if x := r.Station.Mech.Shaft() + spec.Drive.BacklashSteps/2; x >= float64(lo) {
			t.Fatalf("slip %d: the shaft is at %.1f steps, not past the soft limit %d", c.slip, x, lo)
		}
		if got := r.LimitViolations(); got != c.count {
			t.Errorf("slip %d: %d crossings, want %d (shaft at %.1f, soft limit %d, play %.0f)", c.slip, got, c.count,
				r.Station.Mech.Shaft(), lo, spec.Drive.BacklashSteps)
		}
		if n := r.ControllerLimitViolations(); n != 0 {
			t.Errorf("slip %d: %d crossings in the controller's coordinates, which never left the limits", c.slip, n)
		}
	}
}
