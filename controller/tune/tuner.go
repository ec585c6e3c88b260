package tune

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"runtime/debug"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
)

// Transmitter keys a steady tune carrier: the radio (over CAT) or the simulator's radio. The
// tuner uses it only when Options.Transmit allows.
type Transmitter interface {
	Key(ctx context.Context, power physic.Power) error
	Unkey(ctx context.Context) error
}

// Thermometer reads the loop's temperature, for the memory map's drift model.
type Thermometer interface {
	Temperature() (physic.Temperature, error)
}

// Options tune the tuner. Zero values select the defaults given.
type Options struct {
	// Transmit lets the tuner key the transmitter itself for the RF stages. Without it the
	// tuner waits up to CarrierWait for the operator's carrier and never keys anything.
	Transmit bool
	// TunePower is the carrier power asked for when transmitting; default 5 W.
	TunePower physic.Power
	// MinForward is the least forward power that counts as a carrier; default 0.5 W.
	MinForward physic.Power
	// MaxForward aborts a tune when forward power rises above it: tuning at full power can
	// harm the transmitter and stresses the capacitor; default 25 W.
	MaxForward physic.Power
	// CarrierWait is how long to wait for a carrier; default 10 s.
	CarrierWait time.Duration
	// Timeout bounds a whole operation; default 3 min.
	Timeout time.Duration
	// CarrierLimit caps the carrier time one operation may use: a search that would need more
	// ends, unkeyed, with ErrCarrierLimit (a loop that cannot be found in that time is better
	// left alone than swept with a carrier for half a minute). Default 8 s, or the Timeout if
	// that is shorter. (The benchmark's cold tunes need up to about 3 s.)
	CarrierLimit time.Duration
	// ReferenceCarrierLimit is the cap once an operation has to find a lost position from the
	// dip, which scans the whole travel with a carrier; default 60 s, or the Timeout.
	ReferenceCarrierLimit time.Duration
	// TargetSWR is the most a verified SWR may read for a tune to count as tuned; default 2.
	// The verify reading must also be as low as the fitted dip promised, within what the
	// measured noise allows.
	TargetSWR float64
	// DefaultQ is the loaded Q assumed where neither the map nor its prior knows one; default
	// 800.
	DefaultQ float64
	// FallbackWidth is the dip half-width, in steps, assumed where there is no slope to turn a
	// Q into steps; default 10.
	FallbackWidth float64
	// ScanDensity is how many coarse-scan readings fall within one dip half-width; default 1.5.
	ScanDensity float64
	// CentreNoise is the standard error, in steps, the fine sweep is sized to reach for the
	// dip's centre; default 0.1.
	CentreNoise float64
	// SlipLimit: a dip found this many σ of the prediction (and at least four dip widths) away
	// counts as a surprise; two consistent surprises in a row mean lost steps. Default 6.
	SlipLimit float64
	// NominalBacklash is the gear play assumed before a calibration has measured it, and the
	// uncertainty allowed for it; default 0.
	NominalBacklash motion.Steps
	// HasHome says the axis has a home switch (lost position is found by homing); without one
	// a free-turning capacitor is re-referenced from a dip.
	HasHome bool
	// HardStops says the capacitor has hard end stops: a lost position must then be found by
	// homing, never by searching.
	HardStops bool
	Logger    *slog.Logger
}

func (o *Options) defaults() {
	if o.TunePower == 0 {
		o.TunePower = 5 * physic.Watt
	}
	if o.MinForward == 0 {
		o.MinForward = 500 * physic.MilliWatt
	}
	if o.MaxForward == 0 {
		o.MaxForward = 25 * physic.Watt
	}
	if o.Timeout == 0 {
		o.Timeout = 3 * time.Minute
	}
	if o.CarrierWait == 0 {
		o.CarrierWait = min(10*time.Second, o.Timeout)
	}
	if o.CarrierLimit == 0 {
		o.CarrierLimit = min(8*time.Second, o.Timeout)
	}
	if o.ReferenceCarrierLimit == 0 {
		o.ReferenceCarrierLimit = min(time.Minute, o.Timeout)
	}
	if o.TargetSWR == 0 {
		o.TargetSWR = 2
	}
	if o.DefaultQ == 0 {
		o.DefaultQ = 800
	}
	if o.FallbackWidth == 0 {
		o.FallbackWidth = 10
	}
	if o.ScanDensity == 0 {
		o.ScanDensity = 1.5
	}
	if o.CentreNoise == 0 {
		o.CentreNoise = 0.1
	}
	if o.SlipLimit == 0 {
		o.SlipLimit = 6
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
}

func (o Options) validate() error {
	var errs []error
	if !(o.MinForward > 0 && o.MaxForward > o.MinForward) {
		errs = append(errs, fmt.Errorf("forward power limits %v..%v: want 0 < min < max", o.MinForward, o.MaxForward))
	}
	if o.TunePower < o.MinForward || o.TunePower > o.MaxForward {
		errs = append(errs, fmt.Errorf("tune power %v: want between the forward limits %v and %v", o.TunePower, o.MinForward, o.MaxForward))
	}
	if !(o.DefaultQ >= 10 && o.DefaultQ <= 100000) || !(o.FallbackWidth > 0 && o.FallbackWidth < 1e6) ||
		!(o.ScanDensity >= 0.5 && o.ScanDensity <= 20) || !(o.CentreNoise > 0 && o.CentreNoise <= 10) ||
		!(o.SlipLimit >= 2 && o.SlipLimit <= 100) {
		errs = append(errs, fmt.Errorf("search options: default Q %g (10..1e5), fallback width %g (>0), scan density %g (0.5..20), centre noise %g (0..10], slip limit %g (2..100)",
			o.DefaultQ, o.FallbackWidth, o.ScanDensity, o.CentreNoise, o.SlipLimit))
	}
	if o.Timeout < time.Second || o.CarrierLimit < 100*time.Millisecond || o.CarrierLimit > o.Timeout ||
		o.ReferenceCarrierLimit < o.CarrierLimit || o.ReferenceCarrierLimit > o.Timeout {
		errs = append(errs, fmt.Errorf("time limits: timeout %v (at least 1 s), carrier limit %v (100 ms up to the timeout), reference carrier limit %v (from the carrier limit up to the timeout)",
			o.Timeout, o.CarrierLimit, o.ReferenceCarrierLimit))
	}
	if o.CarrierWait <= 0 || o.CarrierWait > o.Timeout {
		errs = append(errs, fmt.Errorf("carrier wait %v: want more than 0, up to the timeout", o.CarrierWait))
	}
	if !(o.TargetSWR >= 1.05 && o.TargetSWR <= 10) {
		errs = append(errs, fmt.Errorf("target SWR %g: want 1.05 to 10", o.TargetSWR))
	}
	if o.NominalBacklash < 0 {
		errs = append(errs, fmt.Errorf("nominal backlash %d: want 0 or more", o.NominalBacklash))
	}
	return errors.Join(errs...)
}

// FrequencySource says which frequency the radio is on now, as last reported (CAT, the API,
// the simulator's radio); 0 when it is not known.
type FrequencySource interface {
	Frequency() physic.Frequency
}

// Deps are the tuner's resources.
type Deps struct {
	Axis        *motion.Axis
	Sensor      sense.Sensor
	Clock       clock.Clock
	Map         *memmap.Map
	Transmitter Transmitter // nil: cannot key; needs Options.Transmit false
	Thermometer Thermometer // nil: temperature unknown
	Observer    Observer    // nil: none
	// Frequency is watched through every RF stage: the radio leaving the frequency being tuned
	// ends the operation at once, unkeyed, and nothing is learned. Nil: the Transmitter's, if it
	// is a FrequencySource, else not watched (an operator's carrier on a radio with no link).
	Frequency FrequencySource
}

// Request asks for one tune.
type Request struct {
	Freq physic.Frequency
	// RF asks for the fine tune with a carrier after the pre-position; without it the tuner
	// only moves to the map's prediction (no RF at all).
	RF bool
}

// Result is how an operation ended.
type Result struct {
	Outcome  Outcome
	Err      error // the cause, for outcomes other than success
	Freq     physic.Frequency
	Started  time.Time
	Finished time.Time
	RFTime   time.Duration // carrier time the operation needed

	Prediction *Prediction
	// Prepositioned: the map's prediction placed the motor before any RF: moved there (a tune
	// without RF), or straight to the search's start from it (with RF; the motor does not stop
	// at PrePos then, and the KindPositioned event says so).
	Prepositioned bool
	PrePos        motion.Steps // where the pre-position went, or would have
	Pos           motion.Steps // final position
	SWR           float64      // verified SWR at Pos (0 without RF)
	Fit           *FitReport
	Readings      int
	Widened       int          // how many times the coarse window had to grow
	Backlash      motion.Steps // Calibrate: the measured play
	Shift         motion.Steps // Referencing or slip correction: how far the position was off
	Learned       int          // points the memory map learned from this operation
	Notes         []string     // things an operator may want to know
}

// Duration is how long the operation took.
func (r Result) Duration() time.Duration { return r.Finished.Sub(r.Started) }

// Sentinel errors behind the outcomes.
var (
	ErrNoCarrier      = errors.New("no carrier")
	ErrCarrierLost    = errors.New("carrier lost")
	ErrOverPower      = errors.New("forward power above the tuning limit")
	ErrNoDip          = errors.New("no dip found")
	ErrOutOfRange     = errors.New("frequency out of the capacitor's range")
	ErrOffFrequency   = errors.New("the radio is not on the frequency to tune")
	ErrTimeout        = errors.New("time limit passed")
	ErrNeedsHoming    = errors.New("position unknown and cannot be re-referenced without homing")
	ErrNeedsReference = errors.New("position unknown: an RF tune must find it again from the dip")
	ErrNoPrediction   = errors.New("nothing to re-reference against: no learned point near this frequency")
	// ErrHandReference: a capacitor with hard stops and no home switch lost its position; only
	// the operator can say where it is (searching for it could drive into a stop).
	ErrHandReference = errors.New("position unknown: hard end stops and no home switch, the operator must reference it")
	// ErrFrequencyChanged: the radio left the frequency being tuned during the RF stages.
	ErrFrequencyChanged = errors.New("the radio's frequency changed during the tune")
	// ErrCarrierLimit: the operation would have needed more carrier time than allowed.
	ErrCarrierLimit = errors.New("carrier time limit reached")
	// ErrNotTuned: the verified SWR stayed above the target, or above what the fitted dip
	// promised, after a second, slower sweep; or the fit stayed doubtful at the most readings,
	// or the dip's own bottom reads above the target, and the loop is left at the dip. Nothing
	// is learned.
	ErrNotTuned = errors.New("the loop could not be verified in tune")
	// ErrUnkeyFailed: the transmitter could not be unkeyed. It latches a fault and withdraws
	// the tuner's permission to transmit until a reset succeeds in unkeying.
	ErrUnkeyFailed = errors.New("could not drop the tune carrier")
	// ErrInternal: a programming error (a panic) ended the operation. It latches a fault.
	ErrInternal = errors.New("internal error")
)

// Tuner is the synchronous tuning core. It is driven by one goroutine (the controller's run
// loop); every method blocks until its operation has ended, and returns early, with the carrier
// dropped and the motor stopped, when ctx ends, when the operation breaks one of its limits
// (time, carrier time, the radio's frequency), on any error, and on a panic, which it turns into
// a latched fault.
type Tuner struct {
	d        Deps
	o        Options
	par      params
	log      *slog.Logger
	m        machine
	surprise *surprise        // the last tune's dip was far from the map's prediction
	freq     physic.Frequency // of the operation in progress, for events
	// calibrated: the axis's backlash was measured (Calibrate or UseBacklash), not assumed
	calibrated bool
	// fault is a latched fault of the tuner's own (an unkey that failed, a panic); the axis
	// latches its own. Either refuses every operation until Reset.
	fault error
	// confirmed: the position was found again (homed, or referenced by the operator) since the
	// last surprise, so a surprise that repeats now is the map's error, not the position's.
	confirmed bool
	// keyUp is the radio's key-up time as last measured: from the key to forward power at the
	// coupler (0: not measured yet). It times the keys, and decides whether a re-key pays.
	keyUp time.Duration
	// noise is the reading noise last measured, pooled with the next measurement (noise.go).
	noise noiseMemory
	// play is the gear play as last measured (to a fraction of a step where this tuner measured
	// it, the whole steps of a stored calibration otherwise) and playSigma its standard error:
	// they turn a dip found sweeping down into final-approach coordinates (valid once
	// calibrated).
	play, playSigma float64
	// playSpeed is the fastest of the sweeps that measured play (0: not measured here): a
	// sweep down faster than that is not turned into final-approach coordinates by it
	// (playKnown).
	playSpeed float64
}

// New checks the resources and options.
func New(d Deps, o Options) (*Tuner, error) {
	o.defaults()
	if d.Axis == nil || d.Sensor == nil || d.Clock == nil || d.Map == nil {
		return nil, errors.New("tuner: axis, sensor, clock and map are required")
	}
	if o.Transmit && d.Transmitter == nil {
		return nil, errors.New("tuner: transmitting allowed but no transmitter given")
	}
	if err := o.validate(); err != nil {
		return nil, fmt.Errorf("tuner options: %w", err)
	}
	if d.Frequency == nil {
		if fs, ok := d.Transmitter.(FrequencySource); ok {
			d.Frequency = fs
		}
	}
	t := &Tuner{d: d, o: o, par: defaultParams(), log: o.Logger.With("component", "tuner")}
	t.m = machine{state: Idle, emit: t.stateChanged}
	return t, nil
}

// Options are the tuner's options, defaults filled in.
func (t *Tuner) Options() Options { return t.o }

// State is the tuner's current state.
func (t *Tuner) State() State { return t.m.state }

// Fault is the latched fault, the tuner's own or the axis's; nil if none.
func (t *Tuner) Fault() error {
	if t.fault != nil {
		return t.fault
	}
	return t.d.Axis.Fault()
}

// radioFrequency is the radio's frequency now, if a source says.
func (t *Tuner) radioFrequency() (physic.Frequency, bool) {
	if t.d.Frequency == nil {
		return 0, false
	}
	f := t.d.Frequency.Frequency()
	return f, f > 0
}

func (t *Tuner) emit(e Event) {
	if t.d.Observer == nil {
		return
	}
	if e.At.IsZero() {
		e.At = t.d.Clock.Now()
	}
	if e.State == "" {
		e.State = t.m.state
	}
	if e.Freq == 0 {
		e.Freq = t.freq
	}
	t.d.Observer.Observe(e)
}

func (t *Tuner) stateChanged(from, to State) {
	t.emit(Event{Kind: KindState, From: from, State: to})
}

func (t *Tuner) note(r *Result, format string, args ...any) {
	s := fmt.Sprintf(format, args...)
	r.Notes = append(r.Notes, s)
	t.emit(Event{Kind: KindNote, Text: s, Freq: r.Freq})
	t.log.Info(s, "freq", r.Freq)
}

// Latch latches err as a fault of the tuner's own: every operation is refused until Reset. The
// service uses it for a panic outside an operation.
func (t *Tuner) Latch(err error) {
	if t.fault == nil {
		t.fault = err
	}
	t.log.Error("fault latched: nothing moves or transmits until a reset", "err", err)
	if t.m.state != Faulted {
		from := t.m.state
		t.m.state = Faulted
		t.stateChanged(from, Faulted)
	}
}

// op is one operation in progress: its context (with its limits), result and carrier.
type op struct {
	t       *Tuner
	ctx     context.Context // the guard; its Err reports any breach
	g       *guard
	res     *Result
	keyed   bool      // a key was attempted: an unkey is owed
	keyedAt time.Time // when the latest key was made
	// keyFreq is the radio's frequency at the first key: a key again after a drop is made
	// only there
	keyFreq physic.Frequency
	// dropped: the carrier is down in the middle of the RF stages (a move that needs no
	// reading, or not keyed yet); the next reading keys. hasKeyed: a key was made this
	// operation; keyedTwice: and another after it.
	dropped, hasKeyed, keyedTwice bool
	keyUpSeen                     bool          // the carrier of the latest key has been seen
	spare                         *spareReading // the reading that found the carrier, not yet used
	lost                          int           // consecutive readings without carrier
	rejects                       [][2]float64  // spans where a coarse hit proved false
	// baseline is the |Γ|² the coupler reads off the dip (1 but for its leakage)
	baseline float64
	readDurs [readingWindow]time.Duration // the latest readings' durations, for readingTime
	nRead    int
	noise    noiseLevel // the latest measured reading noise
	// minCore and centreNoise: a calibration's floor of the fine sweep's readings within ±w, and
	// the standard error of the centre its sweeps are sized for (0: a tune's)
	minCore, centreNoise float64
	// calSpeed is the fastest a calibration's sweeps have run (Tuner.playSpeed)
	calSpeed float64
	done     bool // finish has run
}

func (t *Tuner) begin(ctx context.Context, f physic.Frequency) *op {
	now := t.d.Clock.Now()
	t.freq = f
	g := newGuard(ctx, t, f, now.Add(t.o.Timeout))
	return &op{t: t, ctx: g, g: g, res: &Result{Freq: f, Started: now}, baseline: 1}
}

// check reports a cancelled context or a breach of the operation's limits.
func (p *op) check() error { return p.ctx.Err() }

// ready refuses any operation while a fault is latched.
func (p *op) ready() error {
	t := p.t
	switch {
	case t.fault != nil:
		return fmt.Errorf("%w: reset needed: %w", motion.ErrFault, t.fault)
	case t.d.Axis.Fault() != nil:
		return fmt.Errorf("%w: reset needed", t.d.Axis.Fault())
	case t.m.state == Faulted:
		return fmt.Errorf("%w: reset needed", motion.ErrFault)
	}
	return nil
}

// run executes body as the operation and ends it: carrier dropped first, then the motor
// stopped, state back to Idle (or Faulted), the outcome chosen from the error. The carrier and
// the motor are made safe however body ends, a panic included; a panic is latched as a fault
// with its stack in the log, and reported as the operation's result.
func (p *op) run(body func() (Outcome, error)) (res Result) {
	defer p.g.release()
	defer func() {
		r := recover()
		if r == nil {
			return
		}
		stack := debug.Stack()
		err := fmt.Errorf("%w: panic: %v", ErrInternal, r)
		p.t.log.Error("operation panicked: carrier dropped, motor stopped, fault latched", "err", err, "stack", string(stack))
		p.safe()
		p.t.Latch(err)
		if !p.done {
			res = p.finish("", err)
		} else {
			res = *p.res
		}
	}()
	ok, err := body()
	return p.finish(ok, err)
}

// safe drops the carrier, then stops the motor; both are owed on every way out. It returns what
// went wrong with either.
func (p *op) safe() error {
	cerr := p.carrierOff()
	t := p.t
	var merr error
	if t.d.Axis.Snapshot().Moving {
		// the axis bounds the stop by the move's deadline, and latches a fault if the drive
		// does not stop
		merr = t.d.Axis.StopMove(context.WithoutCancel(p.ctx))
	}
	return errors.Join(cerr, merr)
}

// finish ends the operation: carrier dropped, motor stopped, state back to Idle (or Faulted),
// the outcome chosen from err.
func (p *op) finish(ok Outcome, err error) Result {
	t := p.t
	p.done = true
	if serr := p.safe(); serr != nil {
		err = errors.Join(err, serr)
		ok = ""
	}
	r := p.res
	r.Finished = t.d.Clock.Now()
	r.Pos = t.d.Axis.Position()
	r.Outcome = ok
	if err != nil {
		r.Err = err
		r.Outcome = outcomeOf(err)
	}
	if t.Fault() != nil {
		// a latched fault outranks whatever else the operation ran into
		r.Outcome = Fault
		if r.Err == nil {
			r.Err = t.Fault()
		}
	}
	next := Idle
	if r.Outcome == Fault {
		next = Faulted
	}
	if t.m.state != next {
		if terr := t.m.to(next); terr != nil {
			t.m.state = Faulted
			r.Outcome, r.Err = Fault, errors.Join(err, terr)
		}
	}
	t.emit(Event{Kind: KindResult, Result: r, Freq: r.Freq, SWR: r.SWR, Pos: float64(r.Pos)})
	lvl := slog.LevelInfo
	if r.Err != nil {
		lvl = slog.LevelWarn
	}
	t.log.Log(context.WithoutCancel(p.ctx), lvl, "operation ended", "outcome", r.Outcome, "freq", r.Freq, "pos", r.Pos,
		"swr", r.SWR, "took", r.Duration(), "rf", r.RFTime, "err", r.Err)
	return *r
}

func outcomeOf(err error) Outcome {
	switch {
	case errors.Is(err, ErrInternal), errors.Is(err, ErrUnkeyFailed), errors.Is(err, motion.ErrFault):
		return Fault
	case errors.Is(err, ErrFrequencyChanged):
		return FrequencyChanged
	case errors.Is(err, ErrCarrierLimit):
		return CarrierLimit
	case errors.Is(err, context.Canceled), errors.Is(err, context.DeadlineExceeded):
		return Aborted
	case errors.Is(err, ErrTimeout):
		return TimedOut
	case errors.Is(err, ErrNoCarrier):
		return NoCarrier
	case errors.Is(err, ErrCarrierLost):
		return CarrierLost
	case errors.Is(err, ErrOverPower):
		return OverPower
	case errors.Is(err, ErrNotTuned):
		return NotTuned
	case errors.Is(err, ErrNoDip), errors.Is(err, errNotInWindow):
		return NoDip
	case errors.Is(err, ErrOutOfRange):
		return OutOfRange
	case errors.Is(err, ErrOffFrequency):
		return OffFrequency
	case errors.Is(err, ErrNeedsHoming), errors.Is(err, motion.ErrUntrusted):
		return NeedsHoming
	case errors.Is(err, ErrNeedsReference), errors.Is(err, ErrNoPrediction), errors.Is(err, ErrHandReference),
		errors.Is(err, motion.ErrNoHomeSwitch):
		return NeedsReference
	}
	return Fault
}

// to moves the state machine, turning an impossible edge into a fault.
func (p *op) to(s State) error { return p.t.m.to(s) }

// Reset clears a latched fault in the axis and the tuner (an explicit operator action). If the
// fault was a carrier that could not be dropped, the transmitter is unkeyed first, and the fault
// stays latched while that still fails. The position stays untrusted.
func (t *Tuner) Reset() error {
	if errors.Is(t.fault, ErrUnkeyFailed) && t.d.Transmitter != nil {
		ctx, cancel := context.WithTimeout(context.Background(), t.par.rf.unkeyTimeout)
		err := t.d.Transmitter.Unkey(ctx)
		cancel()
		if err != nil {
			return fmt.Errorf("tuner: reset: the carrier still cannot be dropped: %w", err)
		}
	}
	if err := t.d.Axis.Reset(); err != nil {
		return fmt.Errorf("tuner: reset: %w", err)
	}
	if t.fault != nil {
		t.log.Info("fault reset", "fault", t.fault)
		if errors.Is(t.fault, ErrInternal) {
			// a panic may have cut the position's bookkeeping short
			t.d.Axis.Distrust("fault reset after an internal error")
		}
		t.fault = nil
	}
	if t.m.state == Faulted {
		if err := t.m.to(Idle); err != nil {
			return err
		}
	}
	return nil
}

// Calibrated says whether the backlash has been measured (by Calibrate or UseBacklash).
func (t *Tuner) Calibrated() bool { return t.calibrated }

// UseBacklash installs a backlash measured earlier (a stored calibration).
func (t *Tuner) UseBacklash(b motion.Steps) {
	t.d.Axis.UseBacklash(b)
	t.calibrated = true
	t.play, t.playSigma, t.playSpeed = float64(max(b, 0)), t.par.play.storedSigma, 0
}

// temperature reads the thermometer, if there is one.
func (t *Tuner) temperature() (*physic.Temperature, bool) {
	if t.d.Thermometer == nil {
		return nil, false
	}
	v, err := t.d.Thermometer.Temperature()
	if err != nil {
		t.log.Warn("temperature unavailable", "err", err)
		return nil, false
	}
	return &v, true
}
