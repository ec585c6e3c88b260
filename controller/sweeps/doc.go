// Package sweeps keeps what the tuner measured: one recording (controller/record's format) per
// RF operation the service ran (a tune, a calibration), holding every coupler reading it took —
// when, at which motor step, in which direction of travel, on which frequency, with the forward
// and reflected power and the SWR — and, in its header, the request, its kind and outcome, the
// frequency, the fit (centre, half-width, loaded Q, lowest SWR), the verified SWR, the final
// position and the backlash in use. Recordings are written once, when their operation ends, and
// never rewritten; the oldest are dropped to keep within a count and a size. The daemon's API
// lists and serves them; sim/replay and tanksim read them as they read any recording.
//
// A reading belongs to the move it was taken on: a reading on a sweep is recorded with the
// sweep's direction. A reading taken at rest (the noise and verify readings) is recorded with
// the direction of the motor's most recent travel as the axis reports it in the service's
// snapshots: a positioning move's Pos → Target alone would be wrong after an approach from the
// far side, which ends with a run-up leg the other way. Positions are motor steps, rounded from
// the fractional position of a reading taken on the move.
//
// # Files
//
// Each recording is <id>.sweep in the directory, its ID the UTC second its operation started
// and the request's number, 20260102T150405Z-000123: IDs sort as their operations started, and
// hold only letters, digits and '-', so they are safe in a URL path. Open accepts nothing else,
// so no ID names a path outside the directory. A file is written to a temporary
// name (.<id>.sweep.tmp-…), synced, renamed into place and the directory synced, so a reader or
// a crash sees a whole recording or none. Files of other names are never touched and do not
// count against the limits; a file named as a recording that cannot be read is not listed, but
// counts, and goes when its turn comes.
//
// # What the caller must do
//
// Open the store on a directory of its own inside the daemon's state directory (one store per
// directory, in one process: the state directory's lock sees to the second daemon). Subscribe
// to the service with a depth of SubscriptionDepth before the service starts running requests,
// and call Run with that subscription on a goroutine of its own. On the way out, let the
// service's Run return, Close the subscription, and wait for Run to return: it has then written
// the last operation's recording. List and Open may be called from any goroutine, at any time;
// Close every reader Open returns.
package sweeps
