// Package motion plans the stepper's moves and keeps the one authoritative account of where the
// motor is.
//
// A Profile is the speed plan of one move (trapezoid or triangle, with an optional ramped early
// stop); its position queries are exact and O(1) for simulators, and Delays gives the per-pulse
// timing a real pulse generator follows. A Drive executes profiles; it knows nothing of
// positions.
//
// An Axis owns a Drive, its switches and a clock. It counts the pulses the drive actually
// emitted, refuses any target outside the soft limits (ErrSoftLimit) or from an unknown position
// (ErrUntrusted), and on any fault (drive error, limit switch, switch read error) stops the motor
// at once and latches the fault (ErrFault) until an explicit Reset. Approach arrives at a target
// from one side with the gear play taken up, so that equal targets give equal capacitor angles.
//
// Every move has a deadline on the axis's clock: its planned duration (for a ramped stop, the
// stopped plan's) plus an overrun allowance (Options.OverrunFraction and MinOverrun; TimeLimit
// gives it for a plan). A drive that still reports the move running past it, whether its pulses
// froze, it never reports the end, or it ignores a stop, is taken to hang: the axis stops it at
// once and latches ErrOverdue (an ErrDrive). Wait, MoveTo, MoveThrough, Approach, StopMove,
// Disable and Home therefore return at most one Poll after the deadline of the move that hung,
// and Halt never waits on the drive; whatever depends on the motor being at rest (a tune
// carrier) can be ended then.
//
// What the caller must do after a deadline fault: take the motor for possibly still turning, end
// anything that waits on it, and Halt or Disable the axis. A drive that still reports running
// after that has ignored the stop too; Reset refuses (ErrDrive) for as long as it does, so the
// driver must be power-cycled or seen to before Reset. After Reset the position is untrusted:
// re-home.
//
// What the caller must do: create the Axis with resolved resources, Enable it, then Home (or
// Reference, when the position is known some other way) before any move; drive it from one
// goroutine, reading Snapshot from others; after a fault, find the cause, Reset, and re-home;
// and Halt it on the way out.
package motion
