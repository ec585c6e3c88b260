package bench

import (
	"errors"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/sim/mech"
)

// watch sits between the axis and the simulated drive and counts, move by move, the moves that
// leave the soft limits, two ways:
//
//   - on the simulator's true shaft (crossings): the axis's bookkeeping cannot see a motor that
//     loses steps, so only the truth tells whether the capacitor really went past the limits;
//   - on its own count of the motor's position from the pulses the drive reports, in the
//     controller's coordinates (ctrlCrossings): a check of the axis's bookkeeping and soft-limit
//     logic, blind to lost steps by construction.
//
// The true shaft is read when the drive reports a move over, and as a move starts if the motor
// has been released since (a released motor may slip). Within a move the quasi-static shaft
// only goes one way, and the axis always takes a last count after a move has ended, however it
// ended, so each move's extreme is seen; the settling ring at that instant is within the
// tolerance below. A slip injected with mech.Mechanics.Slip is seen at the end of the next move.
// (Reading the shaft at every poll instead would cost the exhaustive reference strategy, which
// makes thousands of moves, a third more CPU time, and see nothing more.)
//
// Homing legs travel outside the soft limits by design (the switch lies beyond them, and the
// seek runs with the position unknown) and are bounded by the homing options instead: the rig
// tells the watch when the tuner enters and leaves its homing state, and neither count includes
// the legs or the park move in between. (Axis.Home called directly, not through the tuner, is
// not seen: its legs count.) Stalls are counted by the mechanics themselves, homing included: a homing leg must never
// reach a hard stop either.
type watch struct {
	motion.Drive
	mech   *mech.Mechanics
	lo, hi motion.Steps
	// toSteps maps a shaft position to motor steps as the soft limits are defined: the shaft
	// trails the motor by half the described play on an up-approach.
	toSteps float64
	// play is how far past a soft limit the true shaft may legitimately be, in steps: the gear
	// play (the larger of the true and the described one, since the homed frame and the
	// direction of the last move each shift the shaft by up to a play), the settling ring's
	// overshoot, and a step for rounding and the edge a homing finds one poll late.
	play float64

	ignore bool // homing in progress

	// the true shaft
	moveFlagged bool // this move already counted
	endSeen     bool // this move's end already checked
	heldSince   bool // the motor has stayed energised since the last check of the shaft
	crossings   int

	// the controller's coordinates
	pos, start    motion.Steps
	dir           motion.Direction
	synced        bool // pos is in the axis's coordinates
	ctrlFlagged   bool // this move already counted
	ctrlCrossings int

	fail bool // refuse the next Start (fault injection)

	// The gear play as the axis books it, for the references that carry on from the axis's
	// state (see dryAxis): the direction the pulses last went and how many went that way since
	// it last reversed, forgotten when the motor is released, as motion.Axis forgets it.
	lastDir  motion.Direction
	run      motion.Steps
	counted  int64 // pulses of the current move already in run
	timeline *timeline
}

// errDriveFailed is the injected drive failure.
var errDriveFailed = errors.New("simulated drive: bus error")

func (w *watch) Start(m motion.Move) error {
	if w.fail {
		w.fail = false
		return errDriveFailed
	}
	if err := w.Drive.Start(m); err != nil {
		return err
	}
	w.start, w.dir, w.ctrlFlagged, w.moveFlagged, w.endSeen = w.pos, m.Dir, false, false, false
	w.counted = 0
	w.timeline.moveStarted()
	if !w.heldSince {
		w.heldSince = true
		w.checkShaft()
	}
	return nil
}

// Enable and Halt pass through; releasing the motor may let the shaft slip, so the next move
// checks where it starts from.
func (w *watch) Enable(on bool) error {
	if !on {
		w.heldSince = false
	}
	err := w.Drive.Enable(on)
	if !on {
		w.forgetPlay()
	} else if err == nil {
		w.timeline.enabled()
	}
	return err
}

func (w *watch) Halt() error {
	w.heldSince = false
	err := w.Drive.Halt()
	w.forgetPlay()
	return err
}

// forgetPlay forgets the gear play, as the axis does when the motor is released: the pulses
// emitted so far went into the play forgotten.
func (w *watch) forgetPlay() {
	w.counted, _ = w.Drive.Progress()
	w.lastDir, w.run = 0, 0
}

func (w *watch) Progress() (int64, bool) {
	e, running := w.Drive.Progress()
	if n := e - w.counted; n > 0 {
		w.counted = e
		if w.dir != w.lastDir {
			w.lastDir, w.run = w.dir, 0
		}
		w.run += n
	}
	w.pos = w.start + motion.Steps(w.dir)*e
	if w.synced && !w.ignore && !w.ctrlFlagged && (w.pos < w.lo || w.pos > w.hi) {
		w.ctrlCrossings++
		w.ctrlFlagged = true
	}
	if !running && !w.endSeen {
		w.endSeen = true
		w.checkShaft()
		w.timeline.moveStopped()
	}
	return e, running
}

// checkShaft counts the move if the true shaft is now beyond the soft limits by more than play.
func (w *watch) checkShaft() {
	if w.ignore || w.moveFlagged {
		return
	}
	x := w.mech.Shaft() + w.toSteps
	if x < float64(w.lo)-w.play || x > float64(w.hi)+w.play {
		w.crossings++
		w.moveFlagged = true
	}
}

// sync puts the controller-coordinate count into the axis's coordinates (after a reference or
// homing): the drive still reports the last move's pulses, so the move is taken to have started
// that far back.
func (w *watch) sync(p motion.Steps) {
	e, _ := w.Drive.Progress()
	w.pos, w.start, w.synced = p, p-motion.Steps(w.dir)*e, true
}
