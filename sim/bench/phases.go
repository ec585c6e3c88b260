package bench

import (
	"time"

	"github.com/tankd/tankd/controller/tune"
)

// Phases is where one tune's time went, in seconds. Every instant from the tune's start
// (Result.Started) to its end (Result.Finished) is counted in exactly one of the six, so they
// add up to the tune's duration:
//
//   - Approach: everything while the tuner is in its approaching state — the run-up, the move to
//     the chosen position and its settling.
//   - Verify: everything while it is in its verifying state — the readings at the chosen
//     position, and dropping the carrier at the end — and every reading the tuner reports as
//     a verify reading wherever it was taken (a tuner may take the first while it waits for
//     the carrier at the end of the approach).
//
// and, in every other state:
//
//   - Readings: the coupler's conversions, and the whole of every move during which a reading
//     was taken (coarse scans, fine sweeps and calibration sweeps read on the move, so their
//     moves are reading time).
//   - Travel: the moves during which no reading was taken (the pre-position, run-ups, legs to a
//     sweep's start, homing), from the drive's start to the poll at which the axis sees the move
//     over.
//   - Settle: the wait after a move of either kind has been seen over (or after the motor is
//     enabled) until the next move or reading: the axis's settling time.
//   - Other: what is left — waiting for a carrier between readings, keying.
//
// RF time (Case.RFS, the tuner's own Result.RFTime) overlaps these and is not one of them.
type Phases struct {
	Travel   float64 `json:"travel_s"`
	Settle   float64 `json:"settle_s"`
	Readings float64 `json:"readings_s"`
	Approach float64 `json:"approach_s"`
	Verify   float64 `json:"verify_s"`
	Other    float64 `json:"other_s"`
}

// Sum is the total of the phases: the tune's duration.
func (p Phases) Sum() float64 {
	return p.Travel + p.Settle + p.Readings + p.Approach + p.Verify + p.Other
}

// PhaseNames are the phases in report order, as their JSON keys name them.
var PhaseNames = []string{"travel", "settle", "readings", "approach", "verify", "other"}

// Values returns the phases in the order of PhaseNames.
func (p Phases) Values() []float64 {
	return []float64{p.Travel, p.Settle, p.Readings, p.Approach, p.Verify, p.Other}
}

func phasesOf(v []float64) Phases {
	return Phases{Travel: v[0], Settle: v[1], Readings: v[2], Approach: v[3], Verify: v[4], Other: v[5]}
}

// phase is what the time between two marks of a timeline is counted as.
type phase int

const (
	inTravel phase = iota
	inSettle
	inReadings
	inApproach
	inVerify
	inOther
	inMove // a move not yet known to be travel or readings: decided when it ends
)

// timeline follows one tune as the rig sees it — the tuner's state changes from its events,
// the drive's moves from the watch, the coupler's conversions from the sensor — and counts the
// time between each change and the next into Phases. It is driven from the tuner's goroutine.
type timeline struct {
	now func() time.Time

	on   bool
	last time.Time
	acc  [inMove]time.Duration

	state      tune.State
	reading    bool
	moving     bool
	moveRead   bool          // a reading was taken during the running move
	moveTime   time.Duration // the running move's time so far, outside approach and verify
	settling   bool          // idle since a move ended or the motor was enabled
	lastPhases Phases

	// the latest reading: when it was taken, and what its time was counted as
	readFrom, readTo time.Time
	readPhase        phase
	readTime         time.Duration
}

// begin starts counting a tune that starts now.
func (tl *timeline) begin() {
	*tl = timeline{now: tl.now, on: true, last: tl.now(), state: tune.Idle, moving: tl.moving}
}

// current is what the time from the last mark counts as.
func (tl *timeline) current() phase {
	switch {
	case tl.state == tune.Approaching:
		return inApproach
	case tl.state == tune.Verifying:
		return inVerify
	case tl.reading:
		return inReadings
	case tl.moving:
		return inMove
	case tl.settling:
		return inSettle
	}
	return inOther
}

// mark counts the time since the last mark.
func (tl *timeline) mark() {
	if !tl.on {
		return
	}
	now := tl.now()
	d := now.Sub(tl.last)
	tl.last = now
	if d <= 0 {
		return
	}
	if ph := tl.current(); ph == inMove {
		tl.moveTime += d
	} else {
		tl.acc[ph] += d
	}
}

// moveEnded books the running move's time as readings or travel.
func (tl *timeline) moveEnded() {
	if tl.moveRead {
		tl.acc[inReadings] += tl.moveTime
	} else {
		tl.acc[inTravel] += tl.moveTime
	}
	tl.moveTime, tl.moveRead = 0, false
}

func (tl *timeline) stateChanged(to tune.State) {
	tl.mark()
	tl.state = to
}

func (tl *timeline) moveStarted() {
	tl.mark()
	if tl.moving {
		tl.moveEnded() // a drive restarted without the end seen: book what there was
	}
	tl.moving, tl.settling, tl.moveRead, tl.moveTime = true, false, false, 0
}

func (tl *timeline) moveStopped() {
	if !tl.moving {
		return
	}
	tl.mark()
	tl.moveEnded()
	tl.moving, tl.settling = false, true
}

func (tl *timeline) enabled() {
	tl.mark()
	if !tl.moving {
		tl.settling = true
	}
}

func (tl *timeline) readStarted() {
	tl.mark()
	tl.reading, tl.settling = true, false
	if tl.moving {
		tl.moveRead = true
	}
	tl.readFrom, tl.readPhase = tl.last, tl.current()
}

func (tl *timeline) readEnded() {
	tl.mark()
	tl.reading = false
	tl.readTo = tl.last
	tl.readTime = tl.readTo.Sub(tl.readFrom)
}

// verifyReading moves the latest reading's time to Verify when the tuner reports it, taken at
// at, as a verify reading.
func (tl *timeline) verifyReading(at time.Time) {
	if !tl.on || tl.readTime <= 0 || at.Before(tl.readFrom) || at.After(tl.readTo) || tl.readPhase == inVerify {
		return
	}
	tl.acc[tl.readPhase] -= tl.readTime // approach or readings: a reading outranks a move
	tl.acc[inVerify] += tl.readTime
	tl.readPhase = inVerify
}

// end closes the tune: a move still running is booked as it stands.
func (tl *timeline) end() {
	if !tl.on {
		return
	}
	tl.mark()
	tl.moveEnded()
	tl.on = false
	var v [inMove]float64
	for i, d := range tl.acc {
		v[i] = d.Seconds()
	}
	tl.lastPhases = Phases{Travel: v[inTravel], Settle: v[inSettle], Readings: v[inReadings],
		Approach: v[inApproach], Verify: v[inVerify], Other: v[inOther]}
}

// verifyStage is the stage the tuner reports its verify readings under (tune.Event.Stage).
const verifyStage = "verify"

// observe follows the tuner's events.
func (tl *timeline) observe(e tune.Event) {
	switch e.Kind {
	case tune.KindState:
		tl.stateChanged(e.State)
	case tune.KindReading:
		if e.Stage == verifyStage {
			tl.verifyReading(e.At)
		}
	case tune.KindResult:
		tl.end()
	}
}
