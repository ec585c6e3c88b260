package bench

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/vclock"
)

// Rig is the real controller wired to a simulated station on a virtual clock: the station is
// built from the truth (a sim.Spec), the controller is configured from the description the
// builder wrote down (a station.Description, which may differ from the truth's, as real loops
// differ from their drawings) exactly as a real installation's controller is.
type Rig struct {
	Station *sim.Station
	// Time is the clock everything runs on; Clock is the same clock when it is virtual (nil
	// in real time).
	Time      clock.Clock
	Clock     *vclock.Clock
	Axis      *motion.Axis
	Map       *memmap.Map
	Tuner     *tune.Tuner
	Described station.Description
	watch     *watch
	timeline  *timeline
	sensor    sense.Sensor   // the station's sensor as the controller reads it, timed
	axisOpts  motion.Options // what the axis was built with, before its defaults
}

// RigOptions configure a Rig.
type RigOptions struct {
	Truth     sim.Spec
	Described station.Description // zero Name: the truth's own description
	// NominalBacklash is what the controller assumes before calibrating: an upper bound on the
	// play. Zero: the description's (station.Description.NominalBacklash).
	NominalBacklash motion.Steps
	Start           time.Time // zero: vclock.Epoch
	Observer        tune.Observer
	// RealTime runs the rig on the wall clock (a demo that takes as long as real hardware)
	// instead of the virtual clock.
	RealTime bool
	Tune     tune.Options // Transmit, HasHome, HardStops and NominalBacklash are filled in
	// NoTransmit: the controller may not key the radio; an operator must give the carrier.
	NoTransmit bool
	// NoPrior leaves the memory map without the physics prior: the controller knows nothing of
	// where the dip lies until it has found one.
	NoPrior bool
	// WrapSensor, WrapDrive and WrapTransmitter, if set, wrap the station's sensor, drive and
	// radio as the controller sees them (for fault injection in tests).
	WrapSensor      func(sense.Sensor) sense.Sensor
	WrapDrive       func(motion.Drive) motion.Drive
	WrapTransmitter func(tune.Transmitter) tune.Transmitter
	// Jitter runs the rig as on a loaded computer: sleeps on the virtual clock wake late and the
	// drive emits pulses late (see Jitter, LoadedBoard). Zero: off. With RealTime only the
	// drive's part applies; the wall clock brings its own late wake-ups.
	Jitter Jitter
}

// NewRig builds the rig. Without a home switch the axis is referenced where the mechanics
// stand (the installer told the controller where it is); with one, the first tune homes.
func NewRig(o RigOptions) (*Rig, error) {
	if o.Described.Name == "" {
		o.Described = o.Truth.Description
	}
	if o.Start.IsZero() {
		o.Start = vclock.Epoch
	}
	desc := o.Described
	if o.NominalBacklash == 0 {
		o.NominalBacklash = desc.NominalBacklash()
	}
	var clk clock.Clock
	var vclk *vclock.Clock
	switch {
	case o.RealTime && o.Jitter.Sleep.P > 0:
		return nil, errors.New("rig: late sleeps need the virtual clock; the wall clock has its own")
	case o.RealTime:
		clk = clock.Wall{}
	default:
		var err error
		if vclk, err = vclock.NewJittered(o.Start, o.Jitter.Sleep); err != nil {
			return nil, fmt.Errorf("rig: %w", err)
		}
		clk = vclk
	}
	st, err := sim.NewStation(o.Truth, clk)
	if err != nil {
		return nil, err
	}
	if o.Jitter.Steps.P > 0 {
		if err := st.Mech.UseStepJitter(o.Jitter.Steps); err != nil {
			return nil, fmt.Errorf("rig: %w", err)
		}
	}
	if desc.Drive.Home != nil && o.Truth.Drive.Home == nil {
		desc.Drive.Home = nil // described, but not built: the controller is told there is none
	}
	hasHome := desc.Drive.Home != nil
	lo, hi := desc.SoftLimits()
	tl := &timeline{now: clk.Now}
	w := &watch{Drive: st.Mech, mech: st.Mech, lo: lo, hi: hi, timeline: tl,
		toSteps: desc.ShaftLag(),
		play:    math.Max(o.Truth.Drive.BacklashSteps, desc.Drive.BacklashSteps) + o.Truth.Simulator.Drive.SettleSteps + 1,
	}
	res := controller.Resources{Clock: clk, Drive: w, Switches: st.Mech.Switches(), Sensor: timedSensor{st.Sensor(), tl},
		Transmitter: st.Radio, Thermometer: st.Thermometer(), Frequency: st.Radio}
	if o.WrapDrive != nil {
		res.Drive = o.WrapDrive(w)
	}
	if o.WrapTransmitter != nil {
		res.Transmitter = o.WrapTransmitter(res.Transmitter)
		if f, ok := res.Transmitter.(tune.FrequencySource); ok {
			res.Frequency = f
		}
	}
	if o.WrapSensor != nil {
		res.Sensor = o.WrapSensor(res.Sensor)
	}
	var ax *motion.Axis
	// The watch follows homing so that it neither counts homing legs nor loses the frame.
	obs := tune.ObserverFunc(func(e tune.Event) {
		if e.Kind == tune.KindState {
			switch {
			case e.State == tune.Homing:
				w.ignore = true
			case e.From == tune.Homing:
				w.ignore = false
				if ax.Trusted() {
					w.sync(ax.Position())
				}
			}
		}
		if e.Kind == tune.KindResult && e.Result != nil && e.Result.Shift != 0 {
			w.sync(ax.Position())
		}
		tl.observe(e)
		if o.Observer != nil {
			o.Observer.Observe(e)
		}
	})
	to := o.Tune
	to.Transmit = !o.NoTransmit
	a, err := controller.Assemble(context.Background(), desc, res, controller.AssembleOptions{
		Tune: to, Nominal: o.NominalBacklash, Observer: obs, AdjustMap: func(m *memmap.Options) {
			if o.NoPrior {
				m.Prior = nil
			}
		}})
	if err != nil {
		return nil, err
	}
	ax = a.Axis
	if !hasHome {
		ax.Reference(st.Mech.MotorPosition())
		w.sync(ax.Position())
	}
	return &Rig{Station: st, Time: clk, Clock: vclk, Axis: ax, Map: a.Map, Tuner: a.Tuner, Described: desc, watch: w,
		timeline: tl, sensor: res.Sensor, axisOpts: desc.AxisOptions(o.NominalBacklash)}, nil
}

// Tune sets the radio to f and runs the controller's tune there.
func (r *Rig) Tune(ctx context.Context, f physic.Frequency, rf bool) (tune.Result, error) {
	if err := r.Station.Radio.SetFrequency(f); err != nil {
		return tune.Result{}, fmt.Errorf("radio: %w", err)
	}
	r.timeline.begin()
	return r.Tuner.Tune(ctx, tune.Request{Freq: f, RF: rf}), nil
}

// Phases is where the time of the latest tune run by Tune went (see Phases); zero before one
// has ended.
func (r *Rig) Phases() Phases { return r.timeline.lastPhases }

// timedSensor tells the timeline when each reading begins and ends.
type timedSensor struct {
	sense.Sensor
	tl *timeline
}

// Read implements sense.Sensor.
func (s timedSensor) Read(ctx context.Context) (sense.Reading, error) {
	s.tl.readStarted()
	defer s.tl.readEnded()
	return s.Sensor.Read(ctx)
}

// FailDrive makes the drive refuse its next move, as a driver whose bus has failed.
func (r *Rig) FailDrive() { r.watch.fail = true }

// LimitViolations counts the moves during which the simulator's true shaft went outside the
// soft limits by more than the gear play and the settling ring account for: the shaft mapped to
// motor steps as station.Description.SoftLimits defines them (plus half the described play), against
// [Min − tolerance, Max + tolerance], tolerance being the larger of the true and the described
// play, the ring's amplitude, and one step. Homing legs do not count (see watch).
func (r *Rig) LimitViolations() int { return r.watch.crossings }

// ControllerLimitViolations counts the moves that took the motor outside the soft limits by the
// rig's own count of the pulses the drive reports, in the controller's coordinates: what the
// controller's bookkeeping can see, blind to lost steps. A non-zero count means the axis's own
// soft-limit logic failed.
func (r *Rig) ControllerLimitViolations() int { return r.watch.ctrlCrossings }

// Stalls counts the pulses the motor received while the shaft was held at a hard end stop with
// the play wound up (mech.Mechanics.StalledPulses), homing included.
func (r *Rig) Stalls() int64 { return r.Station.Mech.StalledPulses() }

// Reference declares the axis to be at p, as an installer or an oracle that sees the shaft may,
// and keeps the rig's controller-coordinate count in step.
func (r *Rig) Reference(p motion.Steps) {
	r.Axis.Reference(p)
	r.watch.sync(r.Axis.Position())
}

// Hz converts a physic.Frequency to float64 hertz.
func Hz(f physic.Frequency) float64 { return float64(f) / float64(physic.Hertz) }
