// Package fakeloop is a small, deterministic magnetic loop for the controller's own tests, with
// no simulator behind it: a stepper drive whose pulses follow each move's profile on a virtual
// clock, a capacitor shaft behind gear play, an optional home switch, a coupler whose |Γ|² is the
// resonance dip of a loop tuned by that shaft, a radio with a VFO that keys a tune carrier, a
// thermometer, and a physics prior for the memory map.
//
// # The model
//
// The shaft position x0 (in motor steps) at which the loop resonates at frequency f is linear
// in u = (1 MHz / f)², as it is for a capacitor whose capacitance grows linearly with its
// shaft: x0(f) = Base + Slope·u. Around it the reflected share of the power is a Lorentzian
// absorption, |Γ|² = 1 − Depth/(1 + δ²) with δ = (x − x0)/w, and the half-width w = Slope·u/Q is
// how far the resonance moves for a detuning of f/(2Q) (Q the loaded Q). A reading adds seeded
// Gaussian noise to |Γ|². The shaft is dragged by the motor through the gear play: it trails the
// motor by half the play moving up and leads it moving down, so the motor position that puts the
// shaft on the dip when approached from below is x0 + Play/2 — the controller's final-approach
// coordinates, in which Prior predicts.
//
// # What the caller must do
//
// Build a Loop with New; make a motion.Axis on its Drive, Clock and Switches with AxisOptions;
// Reference the axis at Drive.Motor() when there is no home switch (an installer who knows
// where it is); give the tuner Sensor, Radio (Transmitter and FrequencySource) and Thermometer,
// and the memory map Prior. Hooks (Clock.OnSleep, Sensor.OnRead) run on the goroutine that
// sleeps or reads — the controller's — and may call into the service, never into the axis.
package fakeloop

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
)

// Epoch is where a Loop's clock starts unless told otherwise: a fixed instant, so that runs are
// reproducible.
var Epoch = time.Date(2026, time.January, 1, 12, 0, 0, 0, time.UTC)

// Options describe the loop. Zero values take the defaults given; they make a loop much like
// a two-turn loop of a couple of metres on 160 to 40 m with a geared air variable (values from
// memory, chosen for tests, not a design).
type Options struct {
	// Seed seeds the reading noise; default 1.
	Seed uint64
	// Base and Slope place the resonance: x0(f) = Base + Slope·(1 MHz/f)² steps. Default 0 and
	// 240 000, which puts 7.3 MHz near step 4 500 and 1.8 MHz near step 74 000.
	Base, Slope float64
	// Q is the loaded Q; default 1000.
	Q float64
	// Depth is how deep the dip goes: |Γ|² at its bottom is 1 − Depth; default 0.98 (an SWR of
	// about 1.3 at the bottom).
	Depth float64
	// Noise is the standard deviation of a |Γ|² reading; default 0.002. Negative: none.
	Noise float64
	// Play is the true gear play, in steps; default 40.
	Play motion.Steps
	// PriorError is how far the true resonance lies from where Prior puts it, in steps (the
	// loop is not quite as drawn); default 30. PriorSigma is Prior's 1-σ as a fraction of
	// Slope·u, plus 10 steps; default 0.02.
	PriorError, PriorSigma float64
	// Min and Max are the soft limits; default 2 000 and 78 000.
	Min, Max motion.Steps
	// Start is where the motor (and the shaft, play centred) stands at first; default 20 000.
	Start motion.Steps
	// HomeSwitch fits a home switch, active at and below HomeAt motor steps (default 1 000,
	// below the soft limits), released above HomeAt + 8.
	HomeSwitch bool
	HomeAt     motion.Steps
	// Conversion is how long one reading takes; default 2 ms.
	Conversion time.Duration
	// Freq is the radio's frequency at first; default 3.75 MHz.
	Freq physic.Frequency
	// MaxPower is the most the radio keys; default 100 W.
	MaxPower physic.Power
	// Temperature is what the thermometer reads; default 15 °C.
	Temperature physic.Temperature
	// Start time of the clock; default Epoch.
	Epoch time.Time
}

func (o *Options) defaults() {
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	def(&o.Slope, 240000)
	def(&o.Q, 1000)
	def(&o.Depth, 0.98)
	def(&o.Noise, 0.002)
	o.Noise = math.Max(o.Noise, 0)
	def(&o.PriorError, 30)
	def(&o.PriorSigma, 0.02)
	if o.Play == 0 {
		o.Play = 40
	}
	if o.Min == 0 && o.Max == 0 {
		o.Min, o.Max = 2000, 78000
	}
	if o.Start == 0 {
		o.Start = 20000
	}
	if o.HomeAt == 0 {
		o.HomeAt = 1000
	}
	if o.Conversion == 0 {
		o.Conversion = 2 * time.Millisecond
	}
	if o.Freq == 0 {
		o.Freq = 3750 * physic.KiloHertz
	}
	if o.MaxPower == 0 {
		o.MaxPower = 100 * physic.Watt
	}
	if o.Temperature == 0 {
		o.Temperature = physic.ZeroCelsius + 15*physic.Kelvin
	}
	if o.Epoch.IsZero() {
		o.Epoch = Epoch
	}
}

func (o Options) validate() error {
	var errs []error
	if !(o.Slope > 0) || !(o.Q >= 10) || !(o.Depth > 0 && o.Depth < 1) {
		errs = append(errs, fmt.Errorf("fakeloop: slope %g (>0), Q %g (≥10), depth %g (0..1)", o.Slope, o.Q, o.Depth))
	}
	if o.Play < 0 || o.Min >= o.Max || o.Start < o.Min || o.Start > o.Max {
		errs = append(errs, fmt.Errorf("fakeloop: play %d (≥0), soft limits %d..%d, start %d inside them", o.Play, o.Min, o.Max, o.Start))
	}
	if o.Conversion <= 0 || o.MaxPower <= 0 || !(o.PriorSigma > 0) {
		errs = append(errs, fmt.Errorf("fakeloop: conversion %v, max power %v, prior sigma %g: want more than 0", o.Conversion, o.MaxPower, o.PriorSigma))
	}
	return errors.Join(errs...)
}

// Loop is the whole fake installation, on one virtual clock.
type Loop struct {
	o           Options
	Clock       *Clock
	Drive       *Drive
	Home        *Switch // nil without Options.HomeSwitch
	Sensor      *Sensor
	Radio       *Radio
	Thermometer Thermometer
	Prior       Prior
}

// New builds the loop.
func New(o Options) (*Loop, error) {
	o.defaults()
	if err := o.validate(); err != nil {
		return nil, err
	}
	clk := &Clock{Virtual: clock.NewVirtual(o.Epoch)}
	l := &Loop{o: o, Clock: clk}
	l.Drive = &Drive{clk: clk, motor: o.Start, shaft: float64(o.Start), half: float64(o.Play) / 2}
	if o.HomeSwitch {
		l.Home = &Switch{d: l.Drive, at: o.HomeAt, hyst: 8}
	}
	l.Radio = &Radio{freq: o.Freq, max: o.MaxPower}
	l.Sensor = &Sensor{l: l, rng: rand.New(rand.NewPCG(o.Seed, 0x66616b65))}
	l.Thermometer = Thermometer{T: o.Temperature}
	l.Prior = Prior{o: o}
	return l, nil
}

// Options are the loop's options, defaults filled in.
func (l *Loop) Options() Options { return l.o }

// Switches are the loop's switch inputs for motion.NewAxis.
func (l *Loop) Switches() motion.Switches {
	if l.Home == nil {
		return motion.Switches{}
	}
	return motion.Switches{Home: l.Home}
}

// AxisOptions are motion options for this loop: its soft limits, a quick geared stepper
// (16 000 steps/s, 100 000 steps/s², 15 ms settling), the nominal backlash the controller
// assumes before a calibration, and homing onto the switch if there is one.
func (l *Loop) AxisOptions(nominal motion.Steps) motion.Options {
	o := motion.Options{
		Min: l.o.Min, Max: l.o.Max, MaxSpeed: 16000, Accel: 100000,
		Settle: 15 * time.Millisecond, Poll: 2 * time.Millisecond,
		Backlash: nominal, Approach: motion.Up, ApproachMargin: 16,
	}
	if l.o.HomeSwitch {
		o.Homing = motion.HomingOptions{Dir: motion.Down, FastSpeed: 8000, SlowSpeed: 200,
			BackOff: 2*nominal + 64, HomePosition: l.o.HomeAt}
	}
	return o
}

// centre is the shaft position of the resonance at f, in steps.
func (l *Loop) centre(f physic.Frequency) (x, w float64) {
	u := uOf(f)
	return l.o.Base + l.o.Slope*u + l.o.PriorError, l.o.Slope * u / l.o.Q
}

// Dip is where the motor must stand, approached from below with the play taken up, for the
// shaft to sit on the resonance at f: the test's oracle.
func (l *Loop) Dip(f physic.Frequency) float64 {
	x, _ := l.centre(f)
	return x + float64(l.o.Play)/2
}

// HalfWidth is the dip's half-width at f, in steps.
func (l *Loop) HalfWidth(f physic.Frequency) float64 {
	_, w := l.centre(f)
	return w
}

// Gamma2 is the true |Γ|² at frequency f with the shaft where it stands now.
func (l *Loop) Gamma2(f physic.Frequency) float64 {
	x0, w := l.centre(f)
	d := (l.Drive.Shaft() - x0) / w
	return 1 - l.o.Depth/(1+d*d)
}

func uOf(f physic.Frequency) float64 {
	r := float64(physic.MegaHertz) / float64(f)
	return r * r
}

// Clock is the loop's virtual clock, with a hook run at every sleep.
type Clock struct {
	*clock.Virtual
	mu      sync.Mutex
	onSleep func()
}

// OnSleep sets f to run at the start of every Sleep, on the sleeper's goroutine (nil: none).
func (c *Clock) OnSleep(f func()) {
	c.mu.Lock()
	c.onSleep = f
	c.mu.Unlock()
}

// Sleep implements clock.Clock.
func (c *Clock) Sleep(ctx context.Context, d time.Duration) error {
	c.mu.Lock()
	f := c.onSleep
	c.mu.Unlock()
	if f != nil {
		f()
	}
	return c.Virtual.Sleep(ctx, d)
}

// Drive is the stepper driver and the gear train behind it (motion.Drive): each move's pulses
// follow its profile on the clock, and the shaft follows the motor through the gear play.
type Drive struct {
	clk  clock.Clock
	half float64

	mu      sync.Mutex
	enabled bool
	running bool
	mv      motion.Move
	t0      time.Time
	emitted int64
	base    motion.Steps // motor position when the move started
	motor   motion.Steps
	shaft   float64
	starts  int
	halts   int
}

// sync brings the motor and the shaft up to the clock; the caller holds mu.
func (d *Drive) sync() {
	if d.running {
		el := d.clk.Now().Sub(d.t0)
		d.emitted = d.mv.Profile.StepsAt(el)
		d.motor = d.base + motion.Steps(d.mv.Dir)*d.emitted
		if el >= d.mv.Profile.Duration() {
			d.running = false
		}
	}
	// Within one move the motor runs one way, so dragging the shaft at the motor's latest
	// position is the same as dragging it pulse by pulse.
	m := float64(d.motor)
	d.shaft = math.Min(math.Max(d.shaft, m-d.half), m+d.half)
}

// Start implements motion.Drive.
func (d *Drive) Start(m motion.Move) error {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	switch {
	case d.running:
		return errors.New("fake drive: a move is running")
	case !d.enabled:
		return errors.New("fake drive: disabled")
	case m.Dir != motion.Up && m.Dir != motion.Down:
		return fmt.Errorf("fake drive: direction %d", m.Dir)
	}
	if err := m.Profile.Validate(); err != nil {
		return fmt.Errorf("fake drive: %w", err)
	}
	d.starts++
	d.mv, d.t0, d.emitted, d.base, d.running = m, d.clk.Now(), 0, d.motor, true
	d.sync()
	return nil
}

// Progress implements motion.Drive.
func (d *Drive) Progress() (int64, bool) {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	return d.emitted, d.running
}

// Stop implements motion.Drive.
func (d *Drive) Stop(ramp bool) {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	if !d.running {
		return
	}
	if !ramp {
		d.running = false
		return
	}
	d.mv.Profile = d.mv.Profile.StopAt(d.clk.Now().Sub(d.t0))
	d.sync()
}

// Enable implements motion.Drive.
func (d *Drive) Enable(on bool) error {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	if !on {
		d.running = false
	}
	d.enabled = on
	return nil
}

// Halt implements motion.Drive.
func (d *Drive) Halt() error {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	d.halts++
	d.running, d.enabled = false, false
	return nil
}

// String implements motion.Drive.
func (d *Drive) String() string { return "fake drive" }

// Motor is the motor's position now, in steps (the pulses emitted, signed, from the start).
func (d *Drive) Motor() motion.Steps {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	return d.motor
}

// Shaft is the capacitor shaft's position now, in motor steps.
func (d *Drive) Shaft() float64 {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	return d.shaft
}

// Running says whether a move is running now.
func (d *Drive) Running() bool {
	d.mu.Lock()
	defer d.mu.Unlock()
	d.sync()
	return d.running
}

// Enabled says whether the motor is energised.
func (d *Drive) Enabled() bool {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.enabled
}

// Starts counts the moves started.
func (d *Drive) Starts() int {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.starts
}

// Switch is the home switch (motion.Switch), on the motor's count.
type Switch struct {
	d        *Drive
	at, hyst motion.Steps
	mu       sync.Mutex
	on       bool
}

// Active implements motion.Switch.
func (s *Switch) Active() (bool, error) {
	m := s.d.Motor()
	s.mu.Lock()
	defer s.mu.Unlock()
	switch {
	case m <= s.at:
		s.on = true
	case m > s.at+s.hyst:
		s.on = false
	}
	return s.on, nil
}

// String implements motion.Switch.
func (s *Switch) String() string { return "fake home switch" }

// Sensor is the coupler (sense.Sensor): forward power from the radio's carrier, reflected power
// from the dip at the radio's frequency, at the shaft's position halfway through the conversion.
type Sensor struct {
	l    *Loop
	mu   sync.Mutex
	rng  *rand.Rand
	n    int
	hook func()
}

// OnRead sets f to run at the start of every Read, on the reader's goroutine (nil: none).
func (s *Sensor) OnRead(f func()) {
	s.mu.Lock()
	s.hook = f
	s.mu.Unlock()
}

// Reads counts the readings taken.
func (s *Sensor) Reads() int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.n
}

// Read implements sense.Sensor.
func (s *Sensor) Read(ctx context.Context) (sense.Reading, error) {
	s.mu.Lock()
	hook := s.hook
	s.mu.Unlock()
	if hook != nil {
		hook()
	}
	clk := s.l.Clock
	half := s.l.o.Conversion / 2
	if err := clk.Sleep(ctx, half); err != nil {
		return sense.Reading{}, fmt.Errorf("fake coupler: %w", err)
	}
	at := clk.Now()
	f, p := s.l.Radio.carrier()
	var r sense.Reading
	r.At = at
	if p > 0 {
		g2 := s.l.Gamma2(f)
		s.mu.Lock()
		g2 += s.rng.NormFloat64() * s.l.o.Noise
		s.mu.Unlock()
		g2 = math.Min(math.Max(g2, 0), 1)
		r.Forward = p
		r.Reflected = physic.Power(math.Round(g2 * float64(p)))
	}
	if err := clk.Sleep(ctx, s.l.o.Conversion-half); err != nil {
		return sense.Reading{}, fmt.Errorf("fake coupler: %w", err)
	}
	s.mu.Lock()
	s.n++
	s.mu.Unlock()
	return r, nil
}

// Radio is a radio with one VFO that keys a steady tune carrier (tune.Transmitter) and says
// where it is (tune.FrequencySource).
type Radio struct {
	mu     sync.Mutex
	freq   physic.Frequency
	max    physic.Power
	keyed  physic.Power // the tune carrier's power; 0: unkeyed
	keys   int
	unkeys int
}

// Key implements tune.Transmitter.
func (r *Radio) Key(ctx context.Context, p physic.Power) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("fake radio: key: %w", err)
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	if p <= 0 || p > r.max {
		return fmt.Errorf("fake radio: key at %v: want above 0, up to %v", p, r.max)
	}
	r.keyed = p
	r.keys++
	return nil
}

// Unkey implements tune.Transmitter.
func (r *Radio) Unkey(ctx context.Context) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("fake radio: unkey: %w", err)
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	r.keyed = 0
	r.unkeys++
	return nil
}

// Frequency implements tune.FrequencySource.
func (r *Radio) Frequency() physic.Frequency {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.freq
}

// SetFrequency turns the VFO to f, as an operator does.
func (r *Radio) SetFrequency(f physic.Frequency) {
	r.mu.Lock()
	r.freq = f
	r.mu.Unlock()
}

// Transmitting says whether the tune carrier is on.
func (r *Radio) Transmitting() bool {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.keyed > 0
}

// Keys counts the times the carrier was keyed.
func (r *Radio) Keys() int {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.keys
}

func (r *Radio) carrier() (physic.Frequency, physic.Power) {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.freq, r.keyed
}

// Thermometer reads a fixed temperature (tune.Thermometer).
type Thermometer struct{ T physic.Temperature }

// Temperature implements tune.Thermometer.
func (t Thermometer) Temperature() (physic.Temperature, error) { return t.T, nil }

// Prior is the loop's physics prior (memmap.Prior): the resonance as drawn, PriorError away
// from the truth, with an honest σ.
type Prior struct{ o Options }

// Predict implements memmap.Prior.
func (p Prior) Predict(f physic.Frequency) (memmap.Prediction, bool) {
	if f <= 0 {
		return memmap.Prediction{}, false
	}
	u := uOf(f)
	fHz := float64(f) / float64(physic.Hertz)
	return memmap.Prediction{
		Pos:    p.o.Base + p.o.Slope*u + float64(p.o.Play)/2,
		Sigma:  p.o.PriorSigma*p.o.Slope*u + 10,
		Slope:  -2 * p.o.Slope * u / fHz,
		Q:      p.o.Q,
		Source: memmap.SourcePrior,
	}, true
}
