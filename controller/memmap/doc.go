// Package memmap is the loop's memory of where the SWR dip lies: a map from frequency to motor
// position, learned from every good tune, that predicts the position and an honest uncertainty
// for the next one, so that the search can start there with a window of the right size.
//
// # The model
//
// A loop resonates where 1/f² = 4π²·L·C. With a capacitor close to linear in shaft position,
// the dip's position p is close to linear in u = 1/f². The map fits, by weighted least squares,
// a global model p = a + b·u (with a small quadratic term once enough points span a wide range),
// and interpolates the learned points' residuals from it between neighbours, decaying to the
// global model far from any point. The loop drifts over hours: its inductance grows with
// temperature and its capacitor creeps, which scales the whole 1/f² ↔ C relation (a fractional
// change ε of the slope), and now and then a plain offset appears. The map tracks ε, its
// temperature coefficient and the offset from the difference between each tune's prediction and
// its outcome, forgetting old evidence with a half-life. A prediction's σ combines the global
// fit's uncertainty, the residuals' where no point is near, the position noise of the nearby
// points, and the drift since they were learned; with ±2σ the dip is found about 95 % of the
// time if the options describe the loop. With fewer than two points the map uses the Prior, if
// it has one, shifted to agree with the single point.
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
//		tankd-tunemap 1
//		drift at=2026-01-01T12:00:00Z x=0.0001,-1.7e-05,0.4,0,0 p=<15 numbers> tref=15.5 trec=18.25
//		points 2
//		point f=3573000 pos=46012 at=2026-01-01T10:00:00Z temp=15.5 swr=1.08 q=410 eps=0 off=0 dt=0 p=<15> c=<25>
//		point f=7074000 pos=11321 at=2026-01-01T12:00:00Z temp=18.25 swr=1.05 q=350 eps=0.0001 off=0.4 dt=2.75 p=<15> c=<25>
//		sha256 <64 lower-case hex digits>
//
//	  - The first line is the signature and the format version. This package reads and writes
//	    version 1 and rejects others with an error wrapping ErrVersion.
//	  - The drift line is the drift estimate: the time of its latest update (- if none); the
//	    state, comma-separated: the fractional slope change at the reference temperature, its
//	    temperature coefficient per kelvin, the offset in steps, and the long-run levels the
//	    slope change and the offset wander about; the upper triangle of the state's covariance,
//	    row by row; and the reference and the latest temperatures in °C (- if none).
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
