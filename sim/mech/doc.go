// Package mech simulates the drive train between the stepper driver and the tuning capacitor:
// motor, gear with backlash, the capacitor shaft with optional hard end stops, and home and limit
// switches on the shaft.
//
// Mechanics implements motion.Drive and supplies motion.Switch implementations, so the real
// controller/motion.Axis runs on it unchanged. It has seeded fault knobs (missed steps, pulses
// lost beyond the motor's pull-out speed or acceleration, stalls at the end stops, stuck or dead
// switches, slip when the motor is released, Slip for injecting a jump, and step-timing jitter:
// pulses emitted late, as by a pulse generator on a loaded computer), and query methods the rest
// of the simulator and test oracles use to see the truth the controller cannot: Shaft (the
// capacitor's angle, with play and settling ring), MotorPosition, LostSteps, Stalls and
// StalledPulses.
//
// Nothing runs in the background: all state is computed from the clock when asked, so the caller
// only has to advance its clock (sim/vclock in tests) and query. The same seed and the same calls
// give the same run. New returns the motor released: Enable it (through the Axis) before moving.
package mech
