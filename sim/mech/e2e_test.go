package mech_test

import (
	"context"
	"errors"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/sim/mech"
	"github.com/tankd/tankd/sim/vclock"
)

const backlash = 40 // microsteps of gear play in these rigs; tens to hundreds is common practice

// vacuumRig is a vacuum variable behind a geared stepper with play: hard stops, a home switch at
// shaft position 0 and limit switches outside the travel, the motor somewhere unknown.
func vacuumRig(t *testing.T, start int64, seed uint64) (*mech.Mechanics, *motion.Axis, *vclock.Clock) {
	t.Helper()
	clk := vclock.New(vclock.Epoch)
	m, err := mech.New(clk, mech.Options{
		Seed: seed, Start: start, Backlash: backlash, RandomPlay: true,
		HardStops: true, StopMin: -4000, StopMax: 171000,
		Home:            &mech.SwitchOptions{At: 0, Side: motion.Down, Hysteresis: 25},
		Lower:           &mech.SwitchOptions{At: -3000, Side: motion.Down},
		Upper:           &mech.SwitchOptions{At: 170000, Side: motion.Up},
		SettleAmplitude: 1.5, SettleTime: 30 * time.Millisecond,
		SlipOnRelease: true, SlipMax: 400,
	})
	if err != nil {
		t.Fatal(err)
	}
	a, err := motion.NewAxis(m, clk, m.Switches(), motion.Options{
		Min: 500, Max: 160000, MaxSpeed: 4000, Accel: 20000,
		Settle: 40 * time.Millisecond, Poll: time.Millisecond,
		Backlash: backlash, SlipWhenReleased: true,
		Homing: motion.HomingOptions{Dir: motion.Down, FastSpeed: 2000, SlowSpeed: 100, BackOff: 400},
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := a.Enable(context.Background()); err != nil {
		t.Fatal(err)
	}
	return m, a, clk
}

func TestAxisHomesAndApproachesOnTheMechanics(t *testing.T) {
	ctx := context.Background()
	for _, start := range []int64{12345, -100, 90000} {
		m, a, _ := vacuumRig(t, start, uint64(start+5000))
		if err := a.Home(ctx); err != nil {
			t.Fatalf("start %d: %v", start, err)
		}
		// The re-approach runs down with the play taken up, so the shaft leads the motor by
		// half the play and the switch trips at motor −20; HomePosition 0 is assigned there.
		// The axis sees the edge at most one poll late: SlowSpeed·Poll = 0.1 step, so the
		// frame is exact or one step off.
		frame := a.Position() - m.MotorPosition() // axis position − motor position
		if frame != backlash/2 && frame != backlash/2+1 {
			t.Fatalf("start %d: homed frame axis−motor = %d, want %d (or one more)", start, frame, backlash/2)
		}
		t.Logf("start %d: frame %d", start, frame)
		// Every approach from below leaves the play taken up the same way: the shaft trails
		// the motor by half the play, so it ends exactly frame + Backlash/2 short of the target.
		for _, target := range []motion.Steps{50000, 20000, 20007, 159000, 1000, 80000, 79990} {
			if err := a.Approach(ctx, target); err != nil {
				t.Fatalf("start %d: Approach(%d): %v", start, target, err)
			}
			if got, want := m.Shaft(), float64(target-frame-backlash/2); got != want {
				t.Fatalf("start %d: Approach(%d) left the shaft at %v, want %v", start, target, got, want)
			}
		}
		// A plain move down to a target instead leaves the play the other way: Backlash
		// further up than an approach would.
		if err := a.MoveTo(ctx, 60000, 0); err != nil {
			t.Fatal(err)
		}
		if err := a.MoveTo(ctx, 50000, 0); err != nil {
			t.Fatal(err)
		}
		if got, want := m.Shaft(), float64(50000-frame+backlash/2); got != want {
			t.Fatalf("start %d: MoveTo(50000) from above left the shaft at %v, want %v", start, got, want)
		}
		if m.Stalls() != 0 || m.LostSteps() != 0 {
			t.Fatalf("start %d: %d stalls, %d lost pulses", start, m.Stalls(), m.LostSteps())
		}
	}
}

func TestReleasedMotorMustBeRehomed(t *testing.T) {
	ctx := context.Background()
	m, a, _ := vacuumRig(t, 30000, 77)
	if err := a.Home(ctx); err != nil {
		t.Fatal(err)
	}
	if err := a.Approach(ctx, 40000); err != nil {
		t.Fatal(err)
	}
	want := m.Shaft()
	if err := a.Disable(ctx); err != nil {
		t.Fatal(err)
	}
	if err := a.Enable(ctx); err != nil {
		t.Fatal(err)
	}
	if got := m.Shaft(); got == want {
		t.Fatalf("seed 77 drew no slip; pick another seed")
	}
	if err := a.Approach(ctx, 40000); !errors.Is(err, motion.ErrUntrusted) {
		t.Fatalf("Approach after a release = %v, want ErrUntrusted", err)
	}
	if err := a.Home(ctx); err != nil {
		t.Fatal(err)
	}
	if err := a.Approach(ctx, 40000); err != nil {
		t.Fatal(err)
	}
	// Homing again may land one step differently (the edge is found within a step).
	if got := m.Shaft(); got < want-1 || got > want+1 {
		t.Fatalf("after re-homing the shaft is at %v, before the release %v", got, want)
	}
}

func TestSlipIsCaughtOnlyByRehoming(t *testing.T) {
	ctx := context.Background()
	m, a, _ := vacuumRig(t, 30000, 78)
	if err := a.Home(ctx); err != nil {
		t.Fatal(err)
	}
	if err := a.Approach(ctx, 40000); err != nil {
		t.Fatal(err)
	}
	want := m.Shaft()
	m.Slip(250)
	if err := a.Approach(ctx, 40000); err != nil {
		t.Fatal(err)
	}
	if got := m.Shaft(); got != want+250 {
		t.Fatalf("after a hidden slip of 250 the shaft is at %v, want %v", got, want+250)
	}
	a.Distrust("dip found off its expected place")
	if err := a.Home(ctx); err != nil {
		t.Fatal(err)
	}
	if err := a.Approach(ctx, 40000); err != nil {
		t.Fatal(err)
	}
	if got := m.Shaft(); got < want-1 || got > want+1 {
		t.Fatalf("after re-homing the shaft is at %v, want %v±1", got, want)
	}
}

func TestHomingWithStuckSwitchStopsInsideTheStops(t *testing.T) {
	clk := vclock.New(vclock.Epoch)
	m, err := mech.New(clk, mech.Options{
		Start: 5000, HardStops: true, StopMin: -4000, StopMax: 171000,
		Home: &mech.SwitchOptions{At: 0, StuckActive: true},
	})
	if err != nil {
		t.Fatal(err)
	}
	a, err := motion.NewAxis(m, clk, m.Switches(), motion.Options{Min: 500, Max: 160000, Poll: time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	if err := a.Enable(context.Background()); err != nil {
		t.Fatal(err)
	}
	if err := a.Home(context.Background()); !errors.Is(err, motion.ErrSwitchStuck) {
		t.Fatalf("Home with a stuck switch = %v, want ErrSwitchStuck", err)
	}
	if a.Trusted() || m.Stalls() != 0 || m.Moving() {
		t.Fatalf("after the failed homing: trusted %v, %d stalls, moving %v", a.Trusted(), m.Stalls(), m.Moving())
	}
}
