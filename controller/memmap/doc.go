// Package memmap is the loop's memory of where the SWR dip lies: a map from frequency to motor
// position, learned from every good tune, that predicts the position and an honest uncertainty
// for the next one, so that the search can start there with a window of the right size.
//
// # The model
//
// A loop resonates where 1/f² = 4π²·L·C. With a capacitor close to linear in shaft position,
// the dip's position p is close to linear in u = 1/f². The map fits, by weighted least squares,
// a global model p = a + b·u (with a small quadratic term once enough points span a wide range,
// a cluster of close points counting about once),
// and interpolates the learned points' residuals from it between neighbours, decaying to the
// global model far from any point. The loop drifts over hours: its inductance grows with
// temperature and its capacitor creeps, which scales the whole 1/f² ↔ C relation (a fractional
// change ε of the slope), and now and then a plain offset appears. The map tracks ε, its
// temperature coefficient and the offset from the difference between each tune's prediction and
// its outcome, forgetting old evidence with a half-life. A prediction's σ combines the global
// fit's uncertainty, the residuals' where no point is near, the position noise of the nearby
// points, and the drift since they were learned. With fewer than two points the map uses the
// Prior, if it has one, shifted to agree with the nearest point; with more, it uses the prior
// so anchored or its own fit, whichever has been right (see predict in memmap.go).
//
// # An honest σ
//
// The options that size σ (Bend, PosNoise, DriftMax and OffsetMax, the prior's own
// Sigma) are guesses about a loop nobody has measured. Every tune measures them: before a point
// is learned the map predicts it, and the error of that prediction, source by source in
// proportion to each one's share of its variance, says how far each guess is off. The map
// keeps that evidence and scales each source by it (calib.go), starting from the guesses and
// trusting its own record as it grows: a loop better than guessed gets tighter windows within
// the first session, one worse gets wider ones; the evidence of the drift fades with
// DriftHalfLife, so that after a long pause σ is back to what the guessed wander gives. With
// that, ±2σ holds the dip about 95 % of the time and ±3σ nearly always, where the options are
// right and, after some tunes, where they are not; with little data σ errs on the wide side.
// Replay and Summarise measure it against a history of tunes whose true dips are known.
//
// # What the caller must do
//
// Create the map with New or Load. After every good tune, call Learn with the frequency, the
// position found, the time, the loop's temperature if a sensor reads it, and the SWR and Q
// reached; points must come in time order. Call Predict before a tune and search ±2σ around Pos.
// If a re-reference shows the position count was off, call Shift (or Forget the points learned
// since). Save the map after learning (and on the way out): Save replaces the file atomically
// and keeps the previous good copy beside it; Load falls back to that copy and says so with an
// error wrapping ErrUsedPrevious, which the daemon should log. A map is safe for concurrent use.
//
// # FORMAT
//
// The map file is UTF-8 text, lines ending in LF, one item per line, fields separated by single
// spaces, every field key=value in a fixed order:
//
//		tankd-tunemap 2
//		drift at=2026-01-01T12:00:00Z x=0.0001,-1.7e-05,0.4,0,0 p=<15 numbers> tref=15.5 trec=18.25
//		calib shape=3.2,0.4 eps=1.5,0.2 off=1.1,0.9 noise=0.8,0.3 prior=1,0.6
//		points 2
//		point f=3573000 pos=46012 at=2026-01-01T10:00:00Z temp=15.5 swr=1.08 q=410 eps=0 off=0 dt=0 p=<15> c=<25>
//		point f=7074000 pos=11321 at=2026-01-01T12:00:00Z temp=18.25 swr=1.05 q=350 eps=0.0001 off=0.4 dt=2.75 p=<15> c=<25>
//		sha256 <64 lower-case hex digits>
//
//	  - The first line is the signature and the format version. This package writes version 2,
//	    reads versions 1 and 2, and rejects others with an error wrapping ErrVersion. Version 1
//	    had no calib line: a map read from it starts from the options' guesses, and saves as
//	    version 2.
//	  - The drift line is the drift estimate: the time of its latest update (- if none); the
//	    state, comma-separated: the fractional slope change at the reference temperature, its
//	    temperature coefficient per kelvin, the offset in steps, and the long-run levels the
//	    slope change and the offset wander about; the upper triangle of the state's covariance,
//	    row by row; and the reference and the latest temperatures in °C (- if none).
//	  - The calib line is the evidence of the map's past errors (calib.go), for each source of
//	    error in turn (the capacitor's law, the drift of the slope change, the drift of the
//	    offset, the tunes' own position error, the prior): the sum of the shares that source had
//	    in the errors' predicted variance (for the law, each weighted by how far from the learned
//	    points the error was made), and the sum of those shares times the evidence,
//	    comma-separated; both finite and not negative.
//	  - The points line gives the number of point lines that follow, sorted by frequency.
//	  - A point line is a learned point: frequency in hertz (a decimal, to the microhertz),
//	    position in steps, RFC 3339 time in UTC, temperature in °C, SWR and Q, each - if unknown;
//	    then where the drift estimate placed it (fractional slope change, offset, temperature
//	    difference to the reference) and the covariances of that placement's error (upper
//	    triangle) and of the current estimate's error with it (all 25, row by row). Numbers are Go's shortest
//	    round-trip form of a float64.
//	  - The last line is the SHA-256 of every byte before it. This framing is the same in every
//	    version: a file whose checksum fails is corrupt (torn, truncated or edited) and Load
//	    falls back to the previous copy. To change points by hand, use CSV.
//
// CSV (ExportCSV, ImportCSV) carries the points alone: a header row
// frequency_hz,position,time,temperature_c,swr,q and one point per row, times in RFC 3339,
// empty cells for unknown values.
package memmap
