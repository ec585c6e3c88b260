package tune

import (
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

// Kind says what an Event reports.
type Kind string

// Event kinds.
const (
	KindState      Kind = "state"      // the state machine moved (From → State)
	KindPrediction Kind = "prediction" // where the map expects the dip
	KindPositioned Kind = "positioned" // the RF-free pre-position is done (Pos), or, with Text, where it would have gone
	KindMove       Kind = "move"       // a move was started (Pos → Target)
	KindReading    Kind = "reading"    // one coupler reading at a position
	KindNoise      Kind = "noise"      // the measured reading noise, and the sweep it sized
	KindDip        Kind = "dip"        // the coarse scan found (or passed) a dip
	KindFit        Kind = "fit"        // the resonance curve fitted to the fine sweep
	KindResult     Kind = "result"     // the operation's outcome
	KindNote       Kind = "note"       // anything else worth a line in the log
)

// Event is one step of the tuner's work, reported as it happens. The same events feed the
// command-line tools and the daemon's live stream, so a person watching either sees the same
// thing. Fields that do not apply to the kind are zero.
type Event struct {
	At    time.Time
	Kind  Kind
	State State
	From  State // KindState
	Freq  physic.Frequency

	Pos    float64      // motor position (fractional for readings taken on the move)
	Target motion.Steps // KindMove
	Speed  float64      // KindMove, steps/s
	Stage  string       // which stage a reading or move belongs to: "coarse", "fine", "verify", ...

	Gamma2  float64      // KindReading: measured |Γ|²
	SWR     float64      // KindReading, KindResult
	Forward physic.Power // KindReading

	Prediction *Prediction // KindPrediction
	Fit        *FitReport  // KindFit
	Result     *Result     // KindResult
	Text       string      // KindNote, KindDip, KindNoise
}

// Observer receives events. It is called synchronously on the tuner's goroutine, so it must be
// quick and must not call back into the tuner; a slow consumer should copy the event to a
// buffered channel and drop what it cannot keep up with.
type Observer interface {
	Observe(Event)
}

// ObserverFunc adapts a function to Observer.
type ObserverFunc func(Event)

// Observe implements Observer.
func (f ObserverFunc) Observe(e Event) { f(e) }

// FitReport is what the fine sweep's curve fit found.
type FitReport struct {
	Method    string  // "rational", "lorentzian" or "minimum"
	Centre    float64 // motor position of the resonance, steps
	HalfWidth float64 // steps
	QLoaded   float64 // from the width and the map's slope (0 if unknown)
	Bandwidth float64 // loaded half-power bandwidth, Hz (0 if unknown)
	MinSWR    float64 // the fitted curve's lowest measured SWR
	Chi2      float64
	Samples   int
	curve     curve
}

// Gamma2At evaluates the fitted curve (measured |Γ|² against motor position), for plotting;
// NaN for a fit without a curve ("minimum").
func (r *FitReport) Gamma2At(pos float64) float64 { return r.curve.Gamma2At(pos) }
