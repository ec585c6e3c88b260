package tune

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
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
	if o.CarrierWait == 0 {
		o.CarrierWait = 10 * time.Second
	}
	if o.Timeout == 0 {
		o.Timeout = 3 * time.Minute
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
	if o.MinForward <= 0 || o.MaxForward <= o.MinForward {
		errs = append(errs, fmt.Errorf("forward power limits %v..%v: want 0 < min < max", o.MinForward, o.MaxForward))
	}
	if o.TunePower < o.MinForward || o.TunePower > o.MaxForward {
		errs = append(errs, fmt.Errorf("tune power %v: want between the forward limits %v and %v", o.TunePower, o.MinForward, o.MaxForward))
	}
	if o.DefaultQ < 10 || o.DefaultQ > 100000 || o.FallbackWidth <= 0 || o.ScanDensity < 0.5 || o.ScanDensity > 20 {
		errs = append(errs, fmt.Errorf("search options: default Q %g (10..1e5), fallback width %g (>0), scan density %g (0.5..20)", o.DefaultQ, o.FallbackWidth, o.ScanDensity))
	}
	if o.NominalBacklash < 0 {
		errs = append(errs, fmt.Errorf("nominal backlash %d: want 0 or more", o.NominalBacklash))
	}
	return errors.Join(errs...)
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

	Prediction    *Prediction
	Prepositioned bool         // moved to the prediction before any RF
	PrePos        motion.Steps // where the pre-position went
	Pos           motion.Steps // final position
	SWR           float64      // verified SWR at Pos (0 without RF)
	Fit           *FitReport
	Readings      int
	Widened       int          // how many times the coarse window had to grow
	Backlash      motion.Steps // Calibrate: the measured play
	Shift         motion.Steps // Referencing or slip correction: how far the position was off
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
)

// Tuner is the synchronous tuning core. It is driven by one goroutine (the controller's run
// loop); every method blocks until its operation has ended, and returns early, with the motor
// stopped and the carrier dropped, when ctx ends.
type Tuner struct {
	d        Deps
	o        Options
	log      *slog.Logger
	m        machine
	surprise *surprise        // the last tune's dip was far from the map's prediction
	freq     physic.Frequency // of the operation in progress, for events
	// calibrated: the axis's backlash was measured (Calibrate or UseBacklash), not assumed
	calibrated bool
}

// surprise remembers a dip found far from where the map put it, until the next tune shows
// whether the position slipped (the same offset again) or the map was wrong.
type surprise struct {
	pt    memmap.Point
	delta float64
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
	t := &Tuner{d: d, o: o, log: o.Logger.With("component", "tuner")}
	t.m = machine{state: Idle, emit: t.stateChanged}
	return t, nil
}

// State is the tuner's current state.
func (t *Tuner) State() State { return t.m.state }

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

// op is one operation in progress: its deadline, result and carrier.
type op struct {
	t        *Tuner
	ctx      context.Context
	deadline time.Time
	res      *Result
	keyed    bool         // we keyed the transmitter
	rfStart  time.Time    // carrier needed since
	lost     int          // consecutive readings without carrier
	rejects  [][2]float64 // spans where a coarse hit proved false
	baseline float64      // |Γ|² the coupler reads off the dip (1 but for its leakage)
	readDur  time.Duration
}

func (t *Tuner) begin(ctx context.Context, f physic.Frequency) *op {
	now := t.d.Clock.Now()
	t.freq = f
	return &op{t: t, ctx: ctx, deadline: now.Add(t.o.Timeout), res: &Result{Freq: f, Started: now}, baseline: 1}
}

// check reports a cancelled context or a passed deadline.
func (p *op) check() error {
	if err := p.ctx.Err(); err != nil {
		return err
	}
	if p.t.d.Clock.Now().After(p.deadline) {
		return ErrTimeout
	}
	return nil
}

// finish ends the operation: motor stopped, carrier dropped, state back to Idle (or Faulted),
// the outcome chosen from err.
func (p *op) finish(ok Outcome, err error) Result {
	t := p.t
	quiet := context.WithoutCancel(p.ctx)
	if st := t.d.Axis.Snapshot(); st.Moving {
		_ = t.d.Axis.StopMove(quiet)
	}
	p.carrierOff()
	r := p.res
	r.Finished = t.d.Clock.Now()
	r.Pos = t.d.Axis.Position()
	r.Outcome = ok
	if err != nil {
		r.Err = err
		r.Outcome = outcomeOf(err)
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
	t.log.Log(p.ctx, lvl, "operation ended", "outcome", r.Outcome, "freq", r.Freq, "pos", r.Pos,
		"swr", r.SWR, "took", r.Duration(), "rf", r.RFTime, "err", r.Err)
	return *r
}

func outcomeOf(err error) Outcome {
	switch {
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
	case errors.Is(err, ErrNoDip), errors.Is(err, errNotInWindow):
		return NoDip
	case errors.Is(err, ErrOutOfRange):
		return OutOfRange
	case errors.Is(err, ErrOffFrequency):
		return OffFrequency
	case errors.Is(err, ErrNeedsHoming), errors.Is(err, motion.ErrUntrusted):
		return NeedsHoming
	case errors.Is(err, ErrNeedsReference), errors.Is(err, ErrNoPrediction):
		return NeedsReference
	}
	return Fault
}

// to moves the state machine, turning an impossible edge into a fault.
func (p *op) to(s State) error { return p.t.m.to(s) }

// Reset clears a latched fault in the axis and the tuner (an explicit operator action). The
// position stays untrusted.
func (t *Tuner) Reset() error {
	if err := t.d.Axis.Reset(); err != nil {
		return fmt.Errorf("tuner: reset: %w", err)
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

// predict asks the map where the dip is and how wide it should be.
func (t *Tuner) predict(f physic.Frequency) Prediction {
	temp, _ := t.temperature()
	p := Prediction{Source: "none", Trusted: t.d.Axis.Trusted(), Q: t.o.DefaultQ, Width: t.o.FallbackWidth}
	mp, ok := t.d.Map.Predict(f, t.d.Clock.Now(), temp)
	if !ok {
		return p
	}
	p.Pos, p.Sigma, p.Slope, p.Source = mp.Pos, mp.Sigma, mp.Slope, mp.Source
	if mp.Q > 0 {
		p.Q = mp.Q
	}
	if mp.Slope != 0 {
		fHz := float64(f) / float64(physic.Hertz)
		p.Width = math.Abs(mp.Slope) * fHz / (2 * p.Q)
	}
	p.Width = math.Max(p.Width, 0.5)
	return p
}
