package bench

import (
	"context"
	"fmt"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/vclock"
)

// Rig is the real controller wired to a simulated station on a virtual clock: the station is
// built from the truth, the controller is configured from the description the builder wrote
// down (which may differ from the truth, as real loops differ from their drawings).
type Rig struct {
	Station *sim.Station
	// Time is the clock everything runs on; Clock is the same clock when it is virtual (nil
	// in real time).
	Time      clock.Clock
	Clock     *vclock.Clock
	Axis      *motion.Axis
	Map       *memmap.Map
	Tuner     *tune.Tuner
	Described sim.Spec
	watch     *watch
}

// RigOptions configure a Rig.
type RigOptions struct {
	Truth     sim.Spec
	Described sim.Spec // zero Name: the truth itself
	// NominalBacklash is what the controller assumes before calibrating: an upper bound on the
	// play. Zero: the described backlash plus half again.
	NominalBacklash motion.Steps
	Tolerance       sim.Tolerance // the prior's; zero: sim.DefaultTolerance
	Start           time.Time     // zero: vclock.Epoch
	Observer        tune.Observer
	// RealTime runs the rig on the wall clock (a demo that takes as long as real hardware)
	// instead of the virtual clock.
	RealTime bool
	Tune     tune.Options // Transmit, HasHome, HardStops and NominalBacklash are filled in
	// NoTransmit: the controller may not key the radio; an operator must give the carrier.
	NoTransmit bool
	// WrapSensor, if set, wraps the station's sensor (for fault injection in tests).
	WrapSensor func(sense.Sensor) sense.Sensor
}

// NewRig builds the rig. Without a home switch the axis is referenced where the mechanics
// stand (the installer told the controller where it is); with one, the first tune homes.
func NewRig(o RigOptions) (*Rig, error) {
	if o.Described.Name == "" {
		o.Described = o.Truth
	}
	if o.Start.IsZero() {
		o.Start = vclock.Epoch
	}
	if o.Tolerance == (sim.Tolerance{}) {
		o.Tolerance = sim.DefaultTolerance
	}
	desc := o.Described
	if o.NominalBacklash == 0 {
		o.NominalBacklash = desc.NominalBacklash()
	}
	var clk clock.Clock
	var vclk *vclock.Clock
	if o.RealTime {
		clk = clock.Wall{}
	} else {
		vclk = vclock.New(o.Start)
		clk = vclk
	}
	st, err := sim.NewStation(o.Truth, clk)
	if err != nil {
		return nil, err
	}
	axOpts := desc.AxisOptions(o.NominalBacklash)
	w := &watch{Drive: st.Mech, lo: axOpts.Min, hi: axOpts.Max}
	ax, err := motion.NewAxis(w, clk, st.Mech.Switches(), axOpts)
	if err != nil {
		return nil, err
	}
	if err := ax.Enable(context.Background()); err != nil {
		return nil, err
	}
	hasHome := desc.Drive.Home != nil && o.Truth.Drive.Home != nil
	if !hasHome {
		ax.Reference(st.Mech.MotorPosition())
		w.sync(ax.Position())
	}
	mo, err := desc.MapOptions(o.Tolerance)
	if err != nil {
		return nil, err
	}
	mm, err := memmap.New(mo)
	if err != nil {
		return nil, err
	}
	to := desc.TunerOptions(o.Tune, o.NominalBacklash)
	to.Transmit = !o.NoTransmit
	to.HasHome = hasHome
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
		if o.Observer != nil {
			o.Observer.Observe(e)
		}
	})
	sensor := st.Sensor()
	if o.WrapSensor != nil {
		sensor = o.WrapSensor(sensor)
	}
	tn, err := tune.New(tune.Deps{
		Axis: ax, Sensor: sensor, Clock: clk, Map: mm, Transmitter: st.Radio,
		Thermometer: st.Thermometer(), Observer: obs,
	}, to)
	if err != nil {
		return nil, err
	}
	return &Rig{Station: st, Time: clk, Clock: vclk, Axis: ax, Map: mm, Tuner: tn, Described: desc, watch: w}, nil
}

// Tune sets the radio to f and runs the controller's tune there.
func (r *Rig) Tune(ctx context.Context, f physic.Frequency, rf bool) (tune.Result, error) {
	if err := r.Station.Radio.SetFrequency(f); err != nil {
		return tune.Result{}, fmt.Errorf("radio: %w", err)
	}
	return r.Tuner.Tune(ctx, tune.Request{Freq: f, RF: rf}), nil
}

// FailDrive makes the drive refuse its next move, as a driver whose bus has failed.
func (r *Rig) FailDrive() { r.watch.fail = true }

// LimitViolations counts moves that took the motor outside the soft limits, by the rig's own
// count of pulses.
func (r *Rig) LimitViolations() int { return r.watch.violations }

// Hz converts a physic.Frequency to float64 hertz.
func Hz(f physic.Frequency) float64 { return float64(f) / float64(physic.Hertz) }
