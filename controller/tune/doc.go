// Package tune is the synchronous tuning core: it keeps a magnetic loop in tune by moving its
// capacitor's motor to the SWR dip for the radio's frequency, with as little carrier as it can.
// It does no I/O of its own beyond its Deps, and advances only when called.
//
// # Operations
//
// Tune pre-positions the motor from the memory map with no RF at all and, when the request
// asks for RF, finds the dip with a carrier: a coarse scan where the map is not sure enough
// (scan.go), a slow fine sweep through the dip read on the move and a resonance curve fitted to
// it (sweep.go, fit.go), a final approach with the gear play taken up and a verify reading
// (settle.go); a verified tune teaches the map, unless the dip turned up so far from the
// prediction that the position may have slipped (learn.go). Calibrate tunes and then measures
// the gear backlash from sweeps up and down (backlash.go). Home runs the homing sequence.
// Reference takes the operator's word for where the motor is. A freely turning capacitor with
// no home switch finds a lost position again from the dip, by a search of the whole travel
// (reference.go); one with hard stops must be referenced by the operator. The numbers that tune
// the search live, with their reasons, in params.go.
//
// # The state machine
//
// Transitions is the table: idle → positioning → awaiting-carrier → (scanning →) refining →
// approaching → verifying → idle, with homing first where the position is unknown and there is
// a home switch, referencing where there is none, calibrating after a first refine, and
// faulted from anywhere, left only by Reset. Every state change is reported as an Event.
//
// # Safety paths
//
// Every operation runs through one path (op.run in tuner.go): however its body ends —
// returning, failing, cancelled, over one of its limits or panicking — the carrier is dropped
// first and the motor stopped after, and a panic is latched as a fault (ErrInternal). The
// operation's context is a guard (guard.go) that, besides the caller's cancellation, enforces
// the operation's time limit and carrier-time cap on the injected clock and, during the RF
// stages, that the radio stays on the frequency being tuned; every wait asks it, so a breach
// ends the operation at the next poll, mid-move too. An unkey that fails latches a fault and
// withdraws the permission to transmit until a Reset manages to unkey.
//
// # What the caller must do
//
//   - Give New the Deps: an Axis, a Sensor, a Clock and a memory Map are required; a
//     Transmitter if Options.Transmit lets the tuner key the carrier itself; a Thermometer
//     for the map's drift model and an Observer for events if there are any; a
//     FrequencySource to watch the radio (the Transmitter's, if it is one).
//   - Call the tuner from one goroutine only (the service's run loop): every operation blocks
//     until it has ended. Cancel its context to stop it early. An Observer is called on that
//     goroutine and must be quick and must not call back.
//   - After a fault (an outcome of Fault, or Fault() not nil) nothing moves or transmits until
//     an explicit Reset, an operator's action; the position stays untrusted after it. Latch
//     latches a fault from outside an operation, for a panic in the caller's own code.
//   - Install a stored backlash calibration with UseBacklash (LoadCalibration reads it) before
//     the first tune, and save a new one (SaveCalibration) after an outcome of Calibrated.
//   - Save the memory map after an outcome of Tuned or Calibrated: the tuner teaches it (and
//     may make it forget points a new tune contradicts) but never writes it.
package tune
