package bench

import (
	"errors"

	"github.com/tankd/tankd/controller/motion"
)

// watch sits between the axis and the simulated drive and keeps its own count of the motor's
// position from the pulses the drive reports, independent of the axis's bookkeeping, to count
// moves that take the motor outside the soft limits. Homing legs travel outside them by
// design and are not counted.
type watch struct {
	motion.Drive
	lo, hi     motion.Steps
	pos, start motion.Steps
	dir        motion.Direction
	synced     bool // pos is in the axis's coordinates
	ignore     bool // homing in progress
	flagged    bool // this move already counted
	violations int
	fail       bool // refuse the next Start (fault injection)
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
	w.start, w.dir, w.flagged = w.pos, m.Dir, false
	return nil
}

func (w *watch) Progress() (int64, bool) {
	e, running := w.Drive.Progress()
	w.pos = w.start + motion.Steps(w.dir)*e
	if w.synced && !w.ignore && !w.flagged && (w.pos < w.lo || w.pos > w.hi) {
		w.violations++
		w.flagged = true
	}
	return e, running
}

// sync puts the count into the axis's coordinates (after a reference or homing): the drive
// still reports the last move's pulses, so the move is taken to have started that far back.
func (w *watch) sync(p motion.Steps) {
	e, _ := w.Drive.Progress()
	w.pos, w.start, w.synced = p, p-motion.Steps(w.dir)*e, true
}
