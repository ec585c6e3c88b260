package tune

import (
	"fmt"
	"slices"
)

// State is where the tuner is. The names are tankd's own and appear in logs, the API and
// metrics.
type State string

// The tuner's states.
const (
	Idle            State = "idle"
	Positioning     State = "positioning"      // moving to the map's prediction, no RF
	AwaitingCarrier State = "awaiting-carrier" // RF stages need a carrier
	Scanning        State = "scanning"         // coarse scan for the dip
	Refining        State = "refining"         // slow sweep through the dip and the fit
	Approaching     State = "approaching"      // final approach, gear play taken up
	Verifying       State = "verifying"        // reading at the chosen position
	Homing          State = "homing"           // seeking the home switch
	Referencing     State = "referencing"      // re-referencing the position from a dip
	Calibrating     State = "calibrating"      // measuring the backlash
	Faulted         State = "faulted"          // latched fault: needs a reset
)

// transitions is the tune state machine: from each state, where it may go. Every path ends
// back in Idle (with an outcome) or in Faulted.
var transitions = map[State][]State{
	Idle:            {Positioning, AwaitingCarrier, Homing, Faulted},
	Positioning:     {AwaitingCarrier, Idle, Faulted},
	AwaitingCarrier: {Scanning, Refining, Referencing, Idle, Faulted},
	Scanning:        {Refining, Scanning, Idle, Faulted},
	Refining:        {Approaching, Refining, Scanning, Calibrating, Idle, Faulted},
	Approaching:     {Verifying, Idle, Faulted},
	Verifying:       {Refining, Idle, Faulted},
	Homing:          {Positioning, AwaitingCarrier, Idle, Faulted},
	Referencing:     {Scanning, Idle, Faulted},
	Calibrating:     {Approaching, Idle, Faulted},
	Faulted:         {Idle},
}

// Transitions returns the state machine's edges (a copy), for documentation and tests.
func Transitions() map[State][]State {
	out := make(map[State][]State, len(transitions))
	for k, v := range transitions {
		out[k] = slices.Clone(v)
	}
	return out
}

func allowed(from, to State) bool { return slices.Contains(transitions[from], to) }

// Outcome is how a tune (or homing, referencing, calibration) ended.
type Outcome string

// Outcomes.
const (
	Tuned        Outcome = "tuned"         // at the fitted best position, verified
	Positioned   Outcome = "positioned"    // moved to the map's prediction; no RF tune asked for
	NoCarrier    Outcome = "no-carrier"    // no forward power within the wait
	CarrierLost  Outcome = "carrier-lost"  // forward power vanished during the tune
	OverPower    Outcome = "over-power"    // forward power above the tuning limit
	NoDip        Outcome = "no-dip"        // the whole travel holds no dip for this frequency
	OutOfRange   Outcome = "out-of-range"  // the capacitor cannot tune this frequency within the soft limits
	OffFrequency Outcome = "off-frequency" // the radio is elsewhere: nothing was keyed
	Aborted      Outcome = "aborted"       // cancelled (a new frequency, an operator stop)
	// FrequencyChanged: the radio left the frequency during the RF stages; nothing learned.
	FrequencyChanged Outcome = "frequency-changed"
	CarrierLimit     Outcome = "carrier-limit"   // would have needed more carrier time than allowed
	NotTuned         Outcome = "not-tuned"       // verified SWR too high after a slower sweep, a fit still doubtful, or the dip reading above the target (left at the dip); nothing learned
	TimedOut         Outcome = "timed-out"       // the tune's time limit passed
	Fault            Outcome = "fault"           // the axis latched a fault, or the hardware failed
	NeedsHoming      Outcome = "needs-homing"    // position untrusted; only homing can find it
	NeedsReference   Outcome = "needs-reference" // position untrusted; an RF tune will find it from a dip
	Homed            Outcome = "homed"
	Referenced       Outcome = "referenced"
	Calibrated       Outcome = "calibrated"
	Reset            Outcome = "reset" // a latched fault was cleared
)

// machine tracks the state and reports every change.
type machine struct {
	state State
	emit  func(from, to State)
}

// to moves to next; an edge missing from the table is a programming error, reported as such
// (the caller then faults rather than carrying on in an unknown state).
func (m *machine) to(next State) error {
	if next == m.state && next != Scanning && next != Refining {
		return nil
	}
	if !allowed(m.state, next) {
		return fmt.Errorf("tune: no transition from %s to %s", m.state, next)
	}
	from := m.state
	m.state = next
	if m.emit != nil {
		m.emit(from, next)
	}
	return nil
}
