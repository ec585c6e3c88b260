package motion

// Steps is a motor position or a distance, in microsteps of the drive.
type Steps = int64

// Direction is the sense of rotation of a move: Up (+1) increases the step count, Down (-1)
// decreases it.
type Direction int8

// The two directions of travel.
const (
	Down Direction = -1
	Up   Direction = +1
)

// String returns "+" or "-".
func (d Direction) String() string {
	if d < 0 {
		return "-"
	}
	return "+"
}

// Move is one planned move as the drive executes it: a direction and a speed profile.
type Move struct {
	Dir     Direction
	Profile Profile
}

// Drive is a step/dir stepper driver with an enable line. drivers/ implements it on GPIO and sim/
// on the simulated mechanics. A Drive emits pulses; it knows nothing of positions or limits,
// which are the Axis's business.
//
// No method may block: the Axis bounds every move in time by polling Progress on its clock, and
// a call that never returns would defeat that. A move should end (Progress reports it not
// running) at its profile's Duration, give or take the drive's timing; the Axis takes one still
// running well after that (Options.OverrunFraction, MinOverrun) for a hung drive.
type Drive interface {
	// Start begins emitting m's pulses and returns at once. Starting while a move runs is an
	// error; so is starting while the motor is disabled.
	Start(m Move) error
	// Progress reports how many pulses of the current (or last) move have been emitted so far,
	// and whether the move is still running.
	Progress() (emitted int64, running bool)
	// Stop ends the current move early. With ramp, the drive decelerates at the move's
	// acceleration (a controlled stop, a few more pulses); without, it stops at once (a fault
	// stop). Stop with no move running does nothing.
	Stop(ramp bool)
	// Enable energises (true) or releases (false) the motor windings.
	Enable(on bool) error
	// Halt stops any motion at once and releases the motor, leaving the device inert. It is
	// what main calls on the way out (periph's conn.Resource convention).
	Halt() error
	// String names the drive for logs.
	String() string
}

// Switch is a home or limit switch input.
type Switch interface {
	// Active reports whether the switch is actuated now.
	Active() (bool, error)
	// String names the switch for logs.
	String() string
}
