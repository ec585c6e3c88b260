// Package metrics exposes a Service's state and history to Prometheus on a registry of its own.
//
// Two kinds of figures come out of it. Gauges are read from the service's Snapshot at scrape
// time, by a collector that never touches the hardware and never waits for the tuner (Snapshot
// is a pointer load): a scrape in the middle of a scan sees the scan's latest published state.
// Counters and histograms are built from the service's event stream by Run, which consumes a
// subscription of its own; events it could not keep up with are dropped by the subscription
// (the tuner never waits for metrics) and counted in tankd_metrics_events_dropped_total, so a
// nonzero rate there says the other counters are short.
//
// # What the caller must do
//
// Build it with New after the Service and before the service's Run starts (New subscribes at
// once, so nothing the service does from its first request on is missed); run Run on a
// goroutine of its own until the daemon stops, and wait for it to return; serve Handler (on
// /metrics, by convention). Call Close instead of Run if Run is never started, so that the
// service stops queueing events for it. Call LinkError for every failed exchange with the
// radio's CAT link. Nothing else is needed: Handler, LinkError and the registry are safe from
// any goroutine, and none of them blocks on the tuner.
//
// # The metrics
//
// All carry the tankd_ prefix; units are in the suffix (Prometheus base units: seconds, watts,
// hertz), and so are motor steps and map points, which have no SI unit. Standing-wave ratio and
// loaded Q are dimensionless.
//
// From the snapshot, at scrape time:
//
//	name                          type   labels  meaning
//	tankd_swr                     gauge          SWR at the motor's position: during an operation the latest
//	                                             coupler reading's; at rest the last operation's verified SWR,
//	                                             or its latest reading if it verified none. Absent when neither
//	                                             exists (before any RF, after an operation without RF) or the
//	                                             reading had no carrier to measure
//	tankd_forward_power_watts     gauge          forward power of the running operation's latest reading;
//	                                             absent at rest (the coupler is read only during operations)
//	tankd_reflected_power_watts   gauge          reflected power of the same reading; absent at rest
//	tankd_motor_position_steps    gauge          the motor's commanded position, microsteps
//	tankd_position_trusted        gauge          1 if the position is trusted (homed or referenced), else 0
//	tankd_frequency_hertz         gauge          the running operation's frequency, or the last one's; absent
//	                                             if that operation had none (a goto, a homing)
//	tankd_busy                    gauge          1 while an operation runs, else 0
//	tankd_tuner_state             gauge  state   1 for the tuner's state, 0 for every other state of the tune
//	                                             state machine (controller/tune Transitions)
//	tankd_memory_map_points       gauge          points in the frequency-to-position memory map
//	tankd_fault_latched           gauge          1 while a fault (the tuner's or the axis's) is latched: nothing
//	                                             moves or transmits until a reset
//	tankd_radio_frequency_hertz   gauge          the frequency the radio last reported; absent if never heard
//	tankd_radio_stale             gauge          1 if the radio's frequency source has been silent longer than
//	                                             the follower allows (its frequency may be out of date), else 0
//
// From events, by Run:
//
//	name                                   type       labels         meaning
//	tankd_operations_total                 counter    kind, outcome  operations that ran to an end, by request kind
//	                                                                 (controller.Kind) and outcome (tune.Outcome);
//	                                                                 requests replaced or cleared before they ran
//	                                                                 are not operations and are not counted
//	tankd_operation_duration_seconds       histogram  kind           how long each operation took
//	tankd_operation_rf_on_seconds          histogram  kind           carrier time of each operation that needed any
//	tankd_motor_steps_total                counter                   microsteps the tuner commanded, see below
//	tankd_faults_total                     counter                   faults latched (the tuner entering its faulted
//	                                                                 state)
//	tankd_loaded_q                         gauge      band           loaded Q of the latest curve fit on each band
//	                                                                 (controller/band names; "none" outside them)
//	tankd_metrics_events_dropped_total     counter                   events the metrics subscription dropped
//
// Others:
//
//	tankd_radio_link_errors_total          counter                   failed exchanges with the radio (LinkError)
//	tankd_build_info                       gauge      version,       always 1; the daemon's version (Options)
//	                                                  goversion      and the Go release it was built with
//	go_*, process_*                                                  the Go runtime's and the process's own
//
// Label values of tankd_operations_total appear once they have happened (nine kinds times twenty
// outcomes would make 180 series of zeros); use increase() with that in mind.
//
// # Motor steps
//
// tankd_motor_steps_total adds, for every move event of the tuner, the distance from where the
// move started to its target. It is a measure of the wear the tuner asks of the gear train, not
// an odometer: a sweep the tuner stops once it has seen the dip counts its whole commanded
// length, and the legs the axis adds on its own (the run-up below a target that a backlash
// approach needs, the homing sequence) are not counted. It is taken from move events rather
// than from the change of position between snapshots because snapshots are throttled (a short
// run-up and return between two of them would not show) and the position also jumps without
// any motion when it is referenced, homed or corrected for slipped steps.
//
// # Histogram buckets
//
// Both histograms share the buckets DurationBuckets returns: from a tenth of a second (a
// pre-position nudge, a reference or a reset) to a minute (the most carrier time an operation
// may use to find a lost position); longer operations, up to the tuner's time limit, land in
// +Inf.
package metrics
