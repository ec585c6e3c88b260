// Package controller is tankd's service core. Service owns the tuner and the hardware behind it
// on one goroutine, serialises every request that touches the motor, the coupler or the
// transmitter, persists what the tuner learns (State), publishes snapshots that API handlers and
// metric collectors read without touching any hardware, and streams every event to any number of
// subscribers. Follower keeps the loop on the radio's frequency.
//
// The tuning logic itself lives in controller/tune (the synchronous core), motion in
// controller/motion, the memory map in controller/memmap.
//
// # What the caller must do
//
// Open the state directory (controller/statedir) and LoadState from it; build the axis and the
// other resources; NewService with the State in its options; start Run on a goroutine of its
// own and keep it until Done is closed. Submit requests from anywhere, each with its Source;
// keep the RequestID to read Request or Wait for it. Listeners Subscribe, read Events, and Close
// their subscription; a listener that falls behind loses its oldest events (counted in
// Dropped), never holds up the tuner. To resume a stream, Subscribe and then read EventsSince
// the last Seq seen. Feed every frequency the radio reports to a Follower (Update, or Alive when
// nothing changed); the service's Run drives its timers. After Run has returned, write the
// clean-stop marker from CleanStop if it says ok.
//
// # The cancellation table
//
// What a request that arrives does to the one running (cancel it, or let it finish first) and
// to those waiting (replace one, or queue behind them). Cancels and Replaces give the same
// table in code.
//
//	arriving ↓   running →  follow  prepos.  tune  calibrate  goto   home    reference  reset
//	stop                    cancel  cancel   cancel cancel    cancel cancel  (instant)  (instant)
//	follow, preposition,    cancel  cancel   cancel cancel    cancel waits   waits      waits
//	tune, calibrate, goto
//	home, reference         cancel  cancel   cancel cancel    cancel waits   waits      waits
//	reset                   waits   waits    waits  waits     waits  waits   waits      waits
//
// A new frequency makes a pre-position or a tune for the old one pointless, and any carrier
// that is on would be on the wrong frequency; a calibration keys a carrier too; an operator's
// goto, home or reference overrides them all the same. A homing needs no RF and leaves the
// position known only if it finishes, so only a Stop interrupts it: a new frequency waits for
// it and runs after. A reset cancels nothing and goes to the head of the queue.
//
// Among the requests waiting, a newer one replaces an older one of its class: a frequency
// (follow, preposition, tune, calibrate) or a goto replaces a waiting frequency or goto; a home,
// a reference or a reset replaces a waiting one of its own kind. So the queue holds at most one
// of each class, and runs them in the order they came (a reset first). A Stop cancels what runs,
// clears what waits, and is done at once. A cancelled request that was running ends with the
// outcome aborted, its carrier dropped and its motor stopped; one that never ran has no result.
package controller
