package motion

import (
	"context"
	"fmt"
)

// Home finds the home switch, references the position at its edge and parks inside the soft
// limits.
//
// The sequence: if the switch is already active, back away until it releases (ErrSwitchStuck if
// it is still active after 2·BackOff) and BackOff further; seek toward it at FastSpeed for at
// most MaxTravel (ErrSwitchNeverTriggered); back away until it releases, and BackOff further;
// re-approach at SlowSpeed until it trips; declare HomePosition at that edge; then move to the
// park position, HomePosition − Dir·BackOff clamped into the soft limits, off the switch.
//
// Homing ignores the soft limits (the position is unknown; every leg is bounded instead) but not
// the limit switches: one that trips latches a fault as in any move. ErrSwitchStuck and
// ErrSwitchNeverTriggered latch no fault: the leg that finds them is a planned move that came to
// rest under control, so there is nothing to stop, and the caller may retry. A leg still running
// past its deadline latches ErrOverdue as in any move, so Home returns at most one Poll after the
// hung leg's deadline. Any failure leaves the position untrusted; if ctx ends, a ramped stop may
// still be under way (Wait for it).
func (a *Axis) Home(ctx context.Context) error {
	a.mu.Lock()
	err := a.ready()
	if a.sw.Home == nil {
		err = ErrNoHomeSwitch
	}
	if err != nil {
		// Refused before anything moved: a position known by Reference stays known.
		a.mu.Unlock()
		return fmt.Errorf("axis: home: %w", err)
	}
	a.distrust("homing")
	a.mu.Unlock()
	if err := a.home(ctx); err != nil {
		a.mu.Lock()
		a.distrust("homing failed")
		a.mu.Unlock()
		return fmt.Errorf("axis: home: %w", err)
	}
	return nil
}

func (a *Axis) home(ctx context.Context) error {
	h := a.o.Homing
	away := -h.Dir
	on, err := a.homeActive()
	if err != nil {
		a.mu.Lock()
		err = a.trip(err)
		a.mu.Unlock()
		return err
	}
	if on {
		released, _, err := a.leg(ctx, away, 2*h.BackOff, h.FastSpeed, a.homeReleased)
		if err != nil {
			return err
		}
		if !released {
			return fmt.Errorf("%w: active through %d steps %s", ErrSwitchStuck, 2*h.BackOff, away)
		}
		if _, _, err := a.leg(ctx, away, h.BackOff, h.FastSpeed, nil); err != nil {
			return err
		}
	}
	hit, edge, err := a.leg(ctx, h.Dir, h.MaxTravel, h.FastSpeed, a.homeActive)
	if err != nil {
		return err
	}
	if !hit {
		return fmt.Errorf("%w: seeking %d steps %s", ErrSwitchNeverTriggered, h.MaxTravel, h.Dir)
	}
	// The fast seek overshoots the edge by its stopping distance, and by however far it ran
	// between the last poll that found the switch open and the one that found it active (a
	// poll comes late on a busy computer); backing off must cover both.
	a.mu.Lock()
	past := max(abs(a.pos-edge), abs(a.pos-a.clearAt))
	a.mu.Unlock()
	released, _, err := a.leg(ctx, away, past+2*h.BackOff, h.FastSpeed, a.homeReleased)
	if err != nil {
		return err
	}
	if !released {
		return fmt.Errorf("%w: active through %d steps %s", ErrSwitchStuck, past+2*h.BackOff, away)
	}
	// The switch released somewhere after the last poll that still found it active: a late
	// poll finds the release late, so the re-approach is measured from that last poll.
	a.mu.Lock()
	stillActive := a.clearAt
	a.mu.Unlock()
	if _, _, err := a.leg(ctx, away, h.BackOff, h.FastSpeed, nil); err != nil {
		return err
	}
	// Back to where the switch was last seen active and then up to 2·BackOff of switch
	// hysteresis.
	span := abs(a.Position()-stillActive) + 2*h.BackOff
	hit, edge, err = a.leg(ctx, h.Dir, span, h.SlowSpeed, a.homeActive)
	if err != nil {
		return err
	}
	if !hit {
		return fmt.Errorf("%w: re-approaching %d steps %s", ErrSwitchNeverTriggered, span, h.Dir)
	}
	a.mu.Lock()
	// The ramped stop after the edge went on a little; the edge itself is HomePosition.
	a.rebase(h.HomePosition + (a.pos - edge))
	a.trusted, a.why = true, ""
	a.log.Info("homed", "edge", h.HomePosition, "pos", a.pos)
	a.mu.Unlock()
	park := min(max(h.HomePosition-Steps(h.Dir)*h.BackOff, a.o.Min), a.o.Max)
	if err := a.MoveTo(ctx, park, 0); err != nil {
		return fmt.Errorf("park: %w", err)
	}
	return nil
}

// leg runs one bounded homing move of n steps in dir, stopping early (ramped) when until says so.
// It reports whether until fired and the position when it did.
func (a *Axis) leg(ctx context.Context, dir Direction, n Steps, speed float64, until func() (bool, error)) (bool, Steps, error) {
	a.mu.Lock()
	target := a.pos + Steps(dir)*n
	err := a.ready()
	if err == nil {
		err = a.begin(target, speed)
	}
	a.mu.Unlock()
	if err != nil {
		return false, 0, err
	}
	fired, at, err := a.follow(ctx, until, true)
	if err == nil && !fired {
		if pos := a.Position(); pos != target {
			err = fmt.Errorf("%w at %d, leg to %d", ErrStopped, pos, target)
		}
	}
	return fired, at, err
}

func (a *Axis) homeActive() (bool, error) {
	on, err := a.sw.Home.Active()
	if err != nil {
		return false, fmt.Errorf("%w: %s: %w", ErrSwitchRead, a.sw.Home, err)
	}
	return on, nil
}

func (a *Axis) homeReleased() (bool, error) {
	on, err := a.homeActive()
	return !on, err
}
