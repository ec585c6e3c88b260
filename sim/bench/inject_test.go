package bench

import (
	"context"
	"errors"
	"fmt"
	"slices"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/tune"
)

// injector wraps a rig's drive, coupler, transmitter and observer, fails or hangs them on cue,
// moves the radio's VFO on cue, and checks the safety invariants at every call it sees:
//   - the carrier is on only while the tuner is in an RF stage;
//   - the transmitter is keyed only on the frequency being tuned;
//   - after a fault, nothing moves and nothing is keyed until a reset.
//
// Cues count calls from 1 over the injector's life; 0 is never.
type injector struct {
	r *Rig

	// cues
	failStartAt int // the Nth drive Start fails
	hangAt      int // the Nth drive Start hangs: pulses freeze, it never ends, Stop and Halt are ignored
	failReadAt  int // the Nth coupler read fails
	keyFail     int // 1: the Key fails before keying; 2: the radio keys, then the Key reports failure
	unkeyFails  int // the next unkeyFails Unkeys fail
	panicAt     int // the Nth event panics in the observer
	cancelAt    int // the Nth event cancels the operation
	moveVFOAt   int // the Nth reading taken with the carrier on moves the radio to moveVFOTo
	moveVFOTo   physic.Frequency
	moveVFOIn   tune.State // entering this state moves the radio to moveVFOTo (once)
	cancel      context.CancelFunc
	onEvent     func(tune.Event) // called with every event, after the checks

	// counts
	starts, reads, rfReads, events, keys, unkeys int

	// the operation in progress: its frequency, and whether the VFO was moved during it
	opFreq physic.Frequency
	moved  bool
	// latched: a fault was reported and no reset has followed
	latched bool

	stuck      bool // the last unkey failed
	hung       bool
	hungAt     int64
	violations []string
}

func (in *injector) violate(format string, args ...any) {
	if len(in.violations) < 20 {
		in.violations = append(in.violations, fmt.Sprintf(format, args...))
	}
}

// rfStages are the states in which the carrier may be on.
var rfStages = []tune.State{tune.AwaitingCarrier, tune.Scanning, tune.Refining, tune.Approaching,
	tune.Verifying, tune.Referencing, tune.Calibrating}

// checkCarrier: the carrier is on only in an RF stage.
func (in *injector) checkCarrier(where string) {
	// (called from inside the axis: it must not call back into it)
	if in.stuck {
		return // the unkey was lost on the link; the tuner said so and latched a fault
	}
	if in.r.Station.Radio.Transmitting() && !slices.Contains(rfStages, in.r.Tuner.State()) {
		in.violate("%s: carrier on in state %s", where, in.r.Tuner.State())
	}
}

// drive is the injector's motion.Drive.
type injDrive struct {
	motion.Drive
	in *injector
}

func (d injDrive) Start(m motion.Move) error {
	in := d.in
	in.starts++
	in.checkCarrier("drive start")
	if in.latched {
		in.violate("drive start %d with a fault latched", in.starts)
	}
	if in.hung {
		return errors.New("injected: the drive is hung")
	}
	if in.starts == in.failStartAt {
		return errors.New("injected: drive bus error")
	}
	if err := d.Drive.Start(m); err != nil {
		return err
	}
	if in.starts == in.hangAt {
		// The driver hangs: no more pulses reach the motor, but it still says it runs and
		// ignores every stop. (A driver that ran on regardless would need a hardware limit.)
		d.Drive.Stop(false)
		in.hung = true
		in.hungAt, _ = d.Drive.Progress()
	}
	return nil
}

func (d injDrive) Progress() (int64, bool) {
	if d.in.hung {
		return d.in.hungAt, true
	}
	return d.Drive.Progress()
}

func (d injDrive) Stop(ramp bool) {
	if !d.in.hung {
		d.Drive.Stop(ramp)
	}
}

func (d injDrive) Halt() error {
	if d.in.hung {
		return nil // a hung driver ignores it, and still says it runs
	}
	return d.Drive.Halt()
}

// injSensor is the injector's sense.Sensor.
type injSensor struct {
	sense.Sensor
	in *injector
}

func (s injSensor) Read(ctx context.Context) (sense.Reading, error) {
	in := s.in
	in.reads++
	in.checkCarrier("read")
	if in.reads == in.failReadAt {
		return sense.Reading{}, errors.New("injected: converter bus error")
	}
	if in.r.Station.Radio.Transmitting() {
		in.rfReads++
		if in.rfReads == in.moveVFOAt {
			in.moveVFO()
		}
	}
	return s.Sensor.Read(ctx)
}

// injTransmitter is the injector's tune.Transmitter (and FrequencySource, as the radio is).
type injTransmitter struct {
	in *injector
}

func (x injTransmitter) Frequency() physic.Frequency { return x.in.r.Station.Radio.Frequency() }

func (x injTransmitter) Key(ctx context.Context, p physic.Power) error {
	in := x.in
	in.keys++
	if in.latched {
		in.violate("key %d with a fault latched", in.keys)
	}
	if !slices.Contains(rfStages, in.r.Tuner.State()) {
		in.violate("key in state %s", in.r.Tuner.State())
	}
	if f := in.r.Station.Radio.Frequency(); f != in.opFreq {
		in.violate("keyed on %v while tuning %v", f, in.opFreq)
	}
	switch in.keyFail {
	case 1:
		return errors.New("injected: link failed before the radio keyed")
	case 2:
		_ = in.r.Station.Radio.Key(ctx, p)
		return errors.New("injected: link failed after the radio keyed")
	}
	return in.r.Station.Radio.Key(ctx, p)
}

func (x injTransmitter) Unkey(ctx context.Context) error {
	in := x.in
	in.unkeys++
	if in.unkeyFails > 0 {
		in.unkeyFails--
		in.stuck = true
		return errors.New("injected: unkey lost on the link")
	}
	in.stuck = false
	return in.r.Station.Radio.Unkey(ctx)
}

// observe is the injector's observer.
func (in *injector) observe(e tune.Event) {
	in.events++
	in.checkCarrier(fmt.Sprintf("event %s", e.Kind))
	if in.events == in.cancelAt && in.cancel != nil {
		in.cancel()
	}
	if e.Kind == tune.KindState && e.State == in.moveVFOIn && in.moveVFOIn != "" {
		in.moveVFOIn = ""
		in.moveVFO()
	}
	if in.events == in.panicAt {
		panic("injected: observer panic")
	}
	if in.onEvent != nil {
		in.onEvent(e)
	}
}

// moveVFO turns the radio's VFO to moveVFOTo. A move of 100 Hz or less is no move to the tuner:
// well inside the loop's bandwidth on any band.
func (in *injector) moveVFO() {
	if err := in.r.Station.Radio.SetFrequency(in.moveVFOTo); err != nil {
		return
	}
	if d := in.moveVFOTo - in.opFreq; d > 100*physic.Hertz || d < -100*physic.Hertz {
		in.moved = true
	}
}

// install puts the injector into rig options.
func (in *injector) install(o *RigOptions) {
	o.WrapDrive = func(d motion.Drive) motion.Drive { return injDrive{Drive: d, in: in} }
	o.WrapSensor = func(s sense.Sensor) sense.Sensor { return injSensor{Sensor: s, in: in} }
	o.WrapTransmitter = func(tune.Transmitter) tune.Transmitter { return injTransmitter{in: in} }
	o.Observer = tune.ObserverFunc(in.observe)
}

// unhang lets a hung drive go again (the operator power-cycled the driver).
func (in *injector) unhang() { in.hung = false }
