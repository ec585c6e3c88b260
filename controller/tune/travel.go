package tune

import (
	"fmt"
	"time"

	"github.com/tankd/tankd/controller/motion"
)

// legsTo are the full-speed legs that bring the motor from pos to target arriving in direction
// dir with the gear play taken up, given the direction play in which it is taken up at pos (0
// if unknown): straight there when the last leg runs far enough (or the play is already taken
// up that way and the target lies ahead), otherwise by way of a run-up point past the target.
func (p *op) legsTo(pos motion.Steps, play motion.Direction, target motion.Steps, dir motion.Direction) []motion.Steps {
	if target == pos && play == dir {
		return nil
	}
	ahead := (target - pos) * motion.Steps(dir)
	if ahead > 0 && (play == dir || ahead >= p.t.runUp()) {
		return []motion.Steps{target}
	}
	lo, hi := p.t.d.Axis.SoftLimits()
	pre := min(max(target-motion.Steps(dir)*p.t.runUp(), lo), hi)
	if pre == target {
		return []motion.Steps{target}
	}
	return []motion.Steps{pre, target}
}

// legsTime is how long the legs take at full speed from pos, plus the settling time if settle.
func (p *op) legsTime(pos motion.Steps, legs []motion.Steps, settle bool) time.Duration {
	ax := p.t.d.Axis
	var d time.Duration
	for _, to := range legs {
		if to == pos {
			continue
		}
		if pr, err := ax.Plan(to-pos, 0); err == nil {
			d += pr.Duration()
		}
		pos = to
	}
	if settle && len(legs) > 0 {
		d += ax.Settle()
	}
	return d
}

// travel runs legs at full speed, each through to the next without settling, and settles at
// the end if settle. With key, it calls key (which keys the carrier) lead before the motor is
// due to arrive (and settle), so that the carrier, which a radio puts on the antenna only a
// key-up time after the key, is there as the motor is; at once if the legs take less than
// lead. Every poll asks the guard, as the axis's own waits do.
func (p *op) travel(stage string, legs []motion.Steps, settle bool, lead time.Duration, key func() error) error {
	var keyErr error // the key's own, returned as it is
	err := p.runLegs(legs, settle, lead, func() error {
		keyErr = key()
		return keyErr
	}, key != nil, stage)
	if err != nil && err != keyErr && len(legs) > 0 {
		return fmt.Errorf("%s to %d: %w", stage, legs[len(legs)-1], err)
	}
	return err
}

func (p *op) runLegs(legs []motion.Steps, settle bool, lead time.Duration, keyFn func() error, keying bool, stage string) error {
	t := p.t
	ax := t.d.Axis
	clk := t.d.Clock
	keyAt := clk.Now().Add(p.legsTime(ax.Position(), legs, settle) - lead)
	var key func() error
	if keying {
		key = keyFn
	}
	due := func() error {
		if key == nil || clk.Now().Before(keyAt) {
			return nil
		}
		k := key
		key = nil
		return k()
	}
	// until sleeps until d has passed, or until the key is due if that is sooner.
	until := func(d time.Duration) error {
		if key != nil {
			d = min(d, max(keyAt.Sub(clk.Now()), 0))
		}
		return clk.Sleep(p.ctx, d)
	}
	if err := due(); err != nil {
		return err
	}
	moved := false
	for _, to := range legs {
		if ax.Position() == to {
			continue
		}
		if !moved {
			// one move for the whole travel, as an operator thinks of it: from here to there
			t.emit(Event{Kind: KindMove, Stage: stage, Pos: float64(ax.Position()), Target: legs[len(legs)-1], Freq: p.res.Freq})
		}
		if err := ax.Start(to, 0); err != nil {
			return err
		}
		moved = true
		for {
			_, moving, err := ax.Poll()
			if err != nil {
				return err
			}
			if err := p.check(); err != nil {
				return err
			}
			if err := due(); err != nil {
				return err
			}
			if !moving {
				break
			}
			if err := until(t.par.rf.keyPoll); err != nil {
				return err
			}
		}
		if pos := ax.Position(); pos != to {
			return fmt.Errorf("%w at %d, short of %d", motion.ErrStopped, pos, to)
		}
	}
	if settle && moved {
		end := clk.Now().Add(ax.Settle())
		for clk.Now().Before(end) {
			if err := until(end.Sub(clk.Now())); err != nil {
				return err
			}
			if err := due(); err != nil {
				return err
			}
		}
	}
	if err := due(); err != nil {
		return err
	}
	if key != nil {
		// (only if the legs ran ahead of their plan)
		k := key
		key = nil
		if err := k(); err != nil {
			return err
		}
	}
	return p.check()
}
