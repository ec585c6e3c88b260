package tune

import (
	"math"
	"time"

	"github.com/tankd/tankd/controller/motion"
)

// moveKind says how a move arrives at its target.
type moveKind int

const (
	// approachMove arrives moving up with the gear play taken up (Axis.Approach), and settles:
	// the final-approach coordinates hold there.
	approachMove moveKind = iota
	// passMove runs through the target without settling (Axis.MoveThrough): a leg that another
	// follows at once. A motor already there does not move.
	passMove
	// settleMove goes to the target whichever way the play lies, and settles (Axis.MoveTo).
	settleMove
)

// move moves the motor at full speed to target, reported as a move of stage, and checks the
// operation's limits once it has arrived. The axis's waits ask the guard, so a breach also
// ends the move.
func (p *op) move(stage string, target motion.Steps, how moveKind) error {
	t := p.t
	ax := t.d.Axis
	if how == passMove && ax.Position() == target {
		return p.check()
	}
	t.emit(Event{Kind: KindMove, Stage: stage, Pos: float64(ax.Position()), Target: target, Freq: p.res.Freq})
	var err error
	switch how {
	case approachMove:
		err = ax.Approach(p.ctx, target)
	case passMove:
		err = ax.MoveThrough(p.ctx, target, 0)
	default:
		err = ax.MoveTo(p.ctx, target, 0)
	}
	if err != nil {
		return err
	}
	return p.check()
}

// verdict is a sweep stage's decision on one reading taken on the move.
type verdict int

const (
	// readOn: go on reading for as long as the motor moves.
	readOn verdict = iota
	// readAgain: the reading came before the sweep proper (the gear play still being taken
	// up) and is not the sweep's; read on (a motor that stopped short ends the sweep too).
	readAgain
	// stopNow: the sweep has seen what it came for: stop the motor.
	stopNow
)

// sweepJudge takes a sweep's readings one by one, placed on the axis, and says what the sweep
// does next.
type sweepJudge interface {
	take(s sample) verdict
}

// sweepRead starts the motor from from (where it stands, or where a run-up began) to to at
// speed, reported as a move of stage, and reads the coupler on the move, handing each reading
// to j, until j says stop or the move ends. It says whether j stopped the sweep. The motor does
// not settle after a sweep: a move follows. With the carrier down (not keyed yet), the run-up to
// begin, where the readings start to count, goes without it: the carrier is keyed on the way, a
// key-up time before the motor gets there.
func (p *op) sweepRead(stage string, from, begin, to motion.Steps, speed float64, j sweepJudge) (stopped bool, err error) {
	t := p.t
	ax := t.d.Axis
	t.emit(Event{Kind: KindMove, Stage: stage, Pos: float64(from), Target: to, Speed: speed, Freq: p.res.Freq})
	if err := ax.Start(to, speed); err != nil {
		return false, err
	}
	if p.dropped {
		keyAt := t.d.Clock.Now().Add(p.reachTime(begin-from, speed) - t.keyLead())
		for t.d.Clock.Now().Before(keyAt) {
			_, moving, err := ax.Poll()
			if err != nil {
				return false, err
			}
			if err := p.check(); err != nil {
				return false, err
			}
			if !moving {
				break
			}
			if err := t.d.Clock.Sleep(p.ctx, min(t.par.rf.keyPoll, keyAt.Sub(t.d.Clock.Now()))); err != nil {
				return false, err
			}
		}
		if err := p.rekey(); err != nil {
			return false, err
		}
		if err := p.awaitCarrier(); err != nil {
			return false, err
		}
	}
	for {
		s, _, err := p.read(stage)
		if err != nil {
			return false, err
		}
		if j.take(s) == stopNow {
			return true, p.endSweep(to, speed)
		}
		if _, moving, _ := ax.Poll(); !moving {
			break
		}
	}
	return false, p.untilStill()
}

// reachTime is how long a move at up to speed takes from rest to cover n steps.
func (p *op) reachTime(n motion.Steps, speed float64) time.Duration {
	pr, err := p.t.d.Axis.Plan(1, speed)
	d := math.Abs(float64(n))
	if err != nil || !(pr.Accel > 0) {
		return 0
	}
	v, a := math.Min(speed, pr.MaxSpeed), pr.Accel
	sec := math.Sqrt(2 * d / a)
	if ramp := v * v / (2 * a); d > ramp {
		sec = v/a + (d-ramp)/v
	}
	return time.Duration(sec * float64(time.Second))
}

// endSweep ends a sweep the judge has seen enough of: by a ramped stop, which the axis follows
// with its settling time, or by letting the move run its course where its end is nearer than
// that takes (the rest of the way at speed, past the ramp a stop would need anyway).
func (p *op) endSweep(to motion.Steps, speed float64) error {
	ax := p.t.d.Axis
	pos, _, err := ax.Poll()
	if err != nil {
		return err
	}
	left := math.Abs(float64(to - pos))
	if left < p.stopDistance(speed)+speed*ax.Settle().Seconds() {
		return p.untilStill()
	}
	return ax.StopMove(p.ctx)
}

// untilStill follows the running move to its end without settling, asking the guard at every
// poll.
func (p *op) untilStill() error {
	t := p.t
	for {
		_, moving, err := t.d.Axis.Poll()
		if err != nil {
			return err
		}
		if err := p.check(); err != nil {
			return err
		}
		if !moving {
			return nil
		}
		if err := t.d.Clock.Sleep(p.ctx, t.par.rf.keyPoll); err != nil {
			return err
		}
	}
}

// target rounds a position and keeps it where an approach can take up the gear play within the
// soft limits.
func (p *op) target(pos float64) motion.Steps {
	lo, hi := p.t.d.Axis.SoftLimits()
	lo += p.t.runUp()
	return min(max(motion.Steps(math.Round(pos)), lo), hi)
}

// runUp is the travel that certainly takes up the gear play: the measured play once calibrated,
// else the nominal bound.
func (t *Tuner) runUp() motion.Steps {
	b := t.d.Axis.Snapshot().Backlash
	if !t.calibrated {
		b = max(b, t.o.NominalBacklash)
	}
	return b + t.par.motion.runUpMargin
}

// clampPos keeps a position inside the soft limits.
func (p *op) clampPos(pos float64) float64 {
	lo, hi := p.t.d.Axis.SoftLimits()
	return math.Min(math.Max(pos, float64(lo)), float64(hi))
}

// backlashEstimate is the play to convert a position found scanning downward to final-approach
// coordinates: the measured play, or the assumed share of the nominal bound before a
// calibration.
func (p *op) backlashEstimate() float64 {
	if p.t.calibrated {
		return p.t.play
	}
	return float64(p.t.o.NominalBacklash) * p.t.par.motion.assumedPlay
}

// backlashUncertainty is how far a position found scanning downward may be off once converted
// to final-approach coordinates: the same share of the nominal play until a calibration has
// measured it.
func (p *op) backlashUncertainty() float64 {
	if p.t.calibrated {
		return p.t.par.scan.calibratedUncertainty
	}
	return float64(p.t.o.NominalBacklash) * p.t.par.motion.assumedPlay
}
