package radio

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/band"
	"github.com/tankd/tankd/controller/clock"
)

// Errors the radio refuses with. The CAT servers turn each into the dialect's refusal.
var (
	// ErrOutOfBand: the frequency is outside what the radio tunes to.
	ErrOutOfBand = errors.New("frequency outside the radio's coverage")
	// ErrNoTransmit: the radio would transmit outside its transmit bands.
	ErrNoTransmit = errors.New("transmit outside the transmit bands")
	// ErrPowerRange: an output power below zero or above the radio's maximum, or a tune
	// carrier of no power.
	ErrPowerRange = errors.New("output power out of range")
	// ErrMode: not one of the modes the radio has.
	ErrMode = errors.New("unknown mode")
	// ErrVFO: not one of the radio's VFOs.
	ErrVFO = errors.New("unknown VFO")
	// ErrOff: the radio is switched off.
	ErrOff = errors.New("radio switched off")
)

// Mode is an operating mode.
type Mode uint8

// The radio's modes.
const (
	LSB Mode = iota + 1
	USB
	CW
	CWReverse // CW received on the other sideband
	AM
	FM
	Data        // frequency-shift keyed data, mark above space
	DataReverse // the same with the shift reversed
)

func (m Mode) valid() bool { return m >= LSB && m <= DataReverse }

// String returns the mode's usual abbreviation.
func (m Mode) String() string {
	switch m {
	case LSB:
		return "LSB"
	case USB:
		return "USB"
	case CW:
		return "CW"
	case CWReverse:
		return "CW-R"
	case AM:
		return "AM"
	case FM:
		return "FM"
	case Data:
		return "DATA"
	case DataReverse:
		return "DATA-R"
	}
	return fmt.Sprintf("Mode(%d)", m)
}

// VFO names one of the radio's two VFOs.
type VFO uint8

// The two VFOs.
const (
	VFOA VFO = iota
	VFOB
)

// String returns "A" or "B".
func (v VFO) String() string {
	switch v {
	case VFOA:
		return "A"
	case VFOB:
		return "B"
	}
	return fmt.Sprintf("VFO(%d)", v)
}

// Band is a frequency range, both edges included: controller/band's, the one table of the
// amateur bands.
type Band = band.Band

// HamBands returns the amateur HF bands of controller/band, where the radio transmits by
// default. A fresh slice each call, so callers may edit it.
func HamBands() []Band { return band.All() }

// Opts configure a Radio. Zero fields take the documented defaults.
type Opts struct {
	// Bands are where the radio transmits and, without GeneralCoverage, the only places it
	// tunes to. Default HamBands().
	Bands []Band
	// GeneralCoverage lets the radio tune anywhere from CoverageLow to CoverageHigh, as a
	// receiver does; it still transmits only inside Bands.
	GeneralCoverage bool
	// CoverageLow and CoverageHigh bound general coverage. Defaults 30 kHz and 60 MHz, a
	// typical HF-and-6-m receiver (common practice).
	CoverageLow, CoverageHigh physic.Frequency
	// MaxPower is the most output power the radio gives. Default 100 W, the usual HF
	// transceiver (common practice).
	MaxPower physic.Power
	// FreqA and FreqB are the VFOs at switch-on. Defaults 14.200 MHz and 7.100 MHz.
	FreqA, FreqB physic.Frequency
	// Mode is the mode at switch-on. Default USB.
	Mode Mode
	// Power is the output power setting at switch-on, 0 to MaxPower. Default MaxPower.
	Power physic.Power
	// Off starts the radio switched off.
	Off bool
	// Name names the radio in logs. Default "sim radio".
	Name string
	// Clock times the carrier: with one, the carrier reaches the antenna KeyUp after a key
	// and leaves it Unkey after an unkey, as a real radio's does; without one (nil) it follows
	// the keying at once.
	Clock clock.Clock
	// KeyUp is how long after a key (Key, or PTT on) the carrier reaches the antenna: the radio
	// switches its transmit/receive relays and sequences its stages before it lets RF out, and
	// a CAT command takes a while on the line. A coupler reads no forward power before. Default
	// 30 ms (from memory: a relay T/R switch takes some 10 to 20 ms, a short CAT command at
	// 9600 baud about 10 ms more); negative: none.
	KeyUp time.Duration
	// Unkey is how long the carrier stays on the antenna after an unkey (Unkey, PTT off): the
	// CAT command's own time on the line and the carrier's decay. Default 10 ms (from memory);
	// negative: none. Switching the radio off ends the carrier at once.
	Unkey time.Duration
}

// resolve fills in the defaults and reports every bad value at once.
func (o Opts) resolve() (Opts, error) {
	if o.Bands == nil {
		o.Bands = HamBands()
	} else {
		o.Bands = append([]Band(nil), o.Bands...)
	}
	if o.CoverageLow == 0 {
		o.CoverageLow = 30 * physic.KiloHertz
	}
	if o.CoverageHigh == 0 {
		o.CoverageHigh = 60 * physic.MegaHertz
	}
	if o.MaxPower == 0 {
		o.MaxPower = 100 * physic.Watt
	}
	if o.FreqA == 0 {
		o.FreqA = 14200 * physic.KiloHertz
	}
	if o.FreqB == 0 {
		o.FreqB = 7100 * physic.KiloHertz
	}
	if o.Mode == 0 {
		o.Mode = USB
	}
	if o.Power == 0 {
		o.Power = o.MaxPower
	}
	if o.Name == "" {
		o.Name = "sim radio"
	}
	o.KeyUp = keyingDelay(o.KeyUp, defaultKeyUp)
	o.Unkey = keyingDelay(o.Unkey, defaultUnkey)
	var errs []error
	for i, b := range o.Bands {
		if b.Low <= 0 || b.High <= b.Low {
			errs = append(errs, fmt.Errorf("Bands[%d] (%s): %s to %s, want 0 < Low < High", i, b.Name, b.Low, b.High))
		}
	}
	if o.GeneralCoverage && (o.CoverageLow <= 0 || o.CoverageHigh <= o.CoverageLow) {
		errs = append(errs, fmt.Errorf("CoverageLow, CoverageHigh: %s to %s, want 0 < low < high", o.CoverageLow, o.CoverageHigh))
	}
	if o.MaxPower < 0 {
		errs = append(errs, fmt.Errorf("MaxPower: %s, want above 0", o.MaxPower))
	}
	if o.Power < 0 || o.Power > o.MaxPower {
		errs = append(errs, fmt.Errorf("Power: %s, want 0 to MaxPower (%s)", o.Power, o.MaxPower))
	}
	if !o.Mode.valid() {
		errs = append(errs, fmt.Errorf("Mode: %d, want LSB to DataReverse", o.Mode))
	}
	o.FreqA, o.FreqB = roundHz(o.FreqA), roundHz(o.FreqB)
	if len(errs) == 0 { // the coverage check needs valid bands
		for _, v := range []struct {
			key string
			f   physic.Frequency
		}{{"FreqA", o.FreqA}, {"FreqB", o.FreqB}} {
			if !o.tunable(v.f) {
				errs = append(errs, fmt.Errorf("%s: %s is outside the radio's coverage", v.key, v.f))
			}
		}
	}
	if err := errors.Join(errs...); err != nil {
		return o, fmt.Errorf("radio options: %w", err)
	}
	return o, nil
}

// The keying delays' defaults (see Opts.KeyUp and Opts.Unkey).
const (
	defaultKeyUp = 30 * time.Millisecond
	defaultUnkey = 10 * time.Millisecond
)

// keyingDelay resolves a keying delay: zero takes the default d, a negative value means none.
func keyingDelay(v, d time.Duration) time.Duration {
	switch {
	case v == 0:
		return d
	case v < 0:
		return 0
	}
	return v
}

func (o *Opts) transmits(f physic.Frequency) bool {
	for _, b := range o.Bands {
		if b.Contains(f) {
			return true
		}
	}
	return false
}

func (o *Opts) tunable(f physic.Frequency) bool {
	if o.GeneralCoverage {
		return f >= o.CoverageLow && f <= o.CoverageHigh
	}
	return o.transmits(f)
}

// roundHz rounds to the radio's 1 Hz tuning step.
func roundHz(f physic.Frequency) physic.Frequency {
	h := physic.Hertz
	if f < 0 {
		return -roundHz(-f)
	}
	return (f + h/2) / h * h
}

// State is a snapshot of the radio.
type State struct {
	On           bool
	FreqA, FreqB physic.Frequency
	VFO          VFO
	Mode         Mode
	Power        physic.Power // output power setting
	TX           bool         // transmitting, by PTT or by the tune carrier
	Tune         bool         // the transmission is the tune carrier
	TunePower    physic.Power // the tune carrier's power, while Tune
}

// Frequency returns the frequency of the VFO in use.
func (s State) Frequency() physic.Frequency {
	if s.VFO == VFOB {
		return s.FreqB
	}
	return s.FreqA
}

// Carrier reports the carrier the radio puts on the antenna in this state. The tune carrier is
// a steady carrier at its own power. Under PTT the carrier depends on the mode, since no audio
// and no key reach the simulated radio: FM sends its full set power, AM its unmodulated carrier
// of a quarter of the set power (the carrier of a 100 %-modulated AM signal is a quarter of its
// peak envelope power, common practice), and SSB, CW and data modes send nothing.
func (s State) Carrier() (on bool, power physic.Power) {
	if !s.On || !s.TX {
		return false, 0
	}
	if s.Tune {
		return true, s.TunePower
	}
	switch s.Mode {
	case FM:
		return true, s.Power
	case AM:
		return true, s.Power / 4
	}
	return false, 0
}

// Radio is a simulated transceiver. It is safe for concurrent use. The zero value is not
// usable; call New.
type Radio struct {
	mu         sync.Mutex
	o          Opts
	st         State
	subs       map[*Subscription]struct{}
	lastOrigin uint64
	// With a clock: when the latest transmission was keyed, and until when the carrier of one
	// just unkeyed is still on the antenna, at what power.
	keyedAt   time.Time
	tailUntil time.Time
	tailPower physic.Power
}

// New returns a radio configured by o.
func New(o Opts) (*Radio, error) {
	o, err := o.resolve()
	if err != nil {
		return nil, err
	}
	return &Radio{
		o: o,
		st: State{
			On:    !o.Off,
			FreqA: o.FreqA, FreqB: o.FreqB,
			Mode:  o.Mode,
			Power: o.Power,
		},
		subs: map[*Subscription]struct{}{},
	}, nil
}

// String names the radio.
func (r *Radio) String() string { return r.o.Name }

// Halt ends any transmission at once, leaving the radio receiving (periph's conn.Resource
// convention: what main calls on the way out); with a Clock the carrier leaves the antenna
// within Opts.Unkey, as after any unkey.
func (r *Radio) Halt() error { return r.unkey(0) }

// MaxPower returns the most output power the radio gives.
func (r *Radio) MaxPower() physic.Power { return r.o.MaxPower }

// Bands returns the radio's transmit bands.
func (r *Radio) Bands() []Band { return append([]Band(nil), r.o.Bands...) }

// State returns a snapshot of the whole radio.
func (r *Radio) State() State {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.st
}

// Frequency returns the frequency of the VFO in use.
func (r *Radio) Frequency() physic.Frequency { return r.State().Frequency() }

// VFOFrequency returns the frequency of VFO v.
func (r *Radio) VFOFrequency(v VFO) physic.Frequency {
	s := r.State()
	if v == VFOB {
		return s.FreqB
	}
	return s.FreqA
}

// VFO returns the VFO in use.
func (r *Radio) VFO() VFO { return r.State().VFO }

// Mode returns the operating mode.
func (r *Radio) Mode() Mode { return r.State().Mode }

// Power returns the output power setting.
func (r *Radio) Power() physic.Power { return r.State().Power }

// Transmitting reports whether the radio is transmitting, by PTT or with the tune carrier.
func (r *Radio) Transmitting() bool { return r.State().TX }

// Carrier reports what the antenna coupler sees now: whether a carrier is on the antenna and
// its power. See State.Carrier for what each kind of transmission gives; with a Clock, the
// carrier is on the antenna only from KeyUp after the key, and stays on until Unkey after the
// unkey.
func (r *Radio) Carrier() (on bool, power physic.Power) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.o.Clock == nil {
		return r.st.Carrier()
	}
	return r.carrierAt(r.o.Clock.Now())
}

// carrierAt is the carrier on the antenna at now; the caller holds mu and the radio has a clock.
func (r *Radio) carrierAt(now time.Time) (bool, physic.Power) {
	on, p := r.st.Carrier()
	if on && now.Before(r.keyedAt.Add(r.o.KeyUp)) {
		on, p = false, 0
	}
	if !on && r.st.On && now.Before(r.tailUntil) {
		return true, r.tailPower
	}
	return on, p
}

// SetFrequency tunes the VFO in use to f, rounded to 1 Hz. A frequency outside the radio's
// coverage fails with ErrOutOfBand; moving a transmission out of the transmit bands fails with
// ErrNoTransmit.
func (r *Radio) SetFrequency(f physic.Frequency) error { return r.setFrequency(0, nil, f) }

// SetVFOFrequency tunes VFO v to f, as SetFrequency does for the VFO in use.
func (r *Radio) SetVFOFrequency(v VFO, f physic.Frequency) error { return r.setFrequency(0, &v, f) }

func (r *Radio) setFrequency(origin uint64, v *VFO, f physic.Frequency) error {
	f = roundHz(f)
	return r.change(origin, func(s *State) error {
		if !r.o.tunable(f) {
			return fmt.Errorf("set frequency %s: %w", f, ErrOutOfBand)
		}
		vfo := s.VFO
		if v != nil {
			vfo = *v
		}
		switch vfo {
		case VFOA:
			s.FreqA = f
		case VFOB:
			s.FreqB = f
		default:
			return fmt.Errorf("set frequency of VFO %d: %w", vfo, ErrVFO)
		}
		return r.checkTX(s, "set frequency")
	})
}

// SelectVFO makes v the VFO in use.
func (r *Radio) SelectVFO(v VFO) error { return r.selectVFO(0, v) }

func (r *Radio) selectVFO(origin uint64, v VFO) error {
	return r.change(origin, func(s *State) error {
		if v != VFOA && v != VFOB {
			return fmt.Errorf("select VFO %d: %w", v, ErrVFO)
		}
		s.VFO = v
		return r.checkTX(s, "select VFO")
	})
}

// SetMode changes the operating mode.
func (r *Radio) SetMode(m Mode) error { return r.setMode(0, m) }

func (r *Radio) setMode(origin uint64, m Mode) error {
	return r.change(origin, func(s *State) error {
		if !m.valid() {
			return fmt.Errorf("set mode %d: %w", m, ErrMode)
		}
		s.Mode = m
		return nil
	})
}

// SetPower changes the output power setting, 0 to MaxPower; anything else fails with
// ErrPowerRange rather than being clamped, so that a controller asking for more than the radio
// gives learns of it.
func (r *Radio) SetPower(p physic.Power) error { return r.setPower(0, p) }

func (r *Radio) setPower(origin uint64, p physic.Power) error {
	return r.change(origin, func(s *State) error {
		if p < 0 || p > r.o.MaxPower {
			return fmt.Errorf("set power %s (0 to %s): %w", p, r.o.MaxPower, ErrPowerRange)
		}
		s.Power = p
		return nil
	})
}

// Key starts a steady tune carrier at power p, as the radio's tune button does, whatever the
// mode; keying again changes the power. p must be above zero and at most MaxPower
// (ErrPowerRange), and the frequency in use inside a transmit band (ErrNoTransmit).
func (r *Radio) Key(ctx context.Context, p physic.Power) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("key: %w", err)
	}
	return r.key(0, p)
}

func (r *Radio) key(origin uint64, p physic.Power) error {
	return r.change(origin, func(s *State) error {
		if p <= 0 || p > r.o.MaxPower {
			return fmt.Errorf("key at %s (above 0, up to %s): %w", p, r.o.MaxPower, ErrPowerRange)
		}
		s.TX, s.Tune, s.TunePower = true, true, p
		return r.checkTX(s, "key")
	})
}

// Unkey ends any transmission, the tune carrier or PTT. It never fails on a radio that is
// switched off, which transmits nothing anyway.
func (r *Radio) Unkey(ctx context.Context) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("unkey: %w", err)
	}
	return r.unkey(0)
}

func (r *Radio) unkey(origin uint64) error {
	err := r.change(origin, func(s *State) error {
		s.TX, s.Tune, s.TunePower = false, false, 0
		return nil
	})
	if errors.Is(err, ErrOff) {
		return nil
	}
	return err
}

// PTT switches the transmitter as the CAT transmit and receive commands do. Transmitting this
// way sends the microphone path, which carries no audio in the simulator: in SSB, CW and data
// modes there is no carrier at all (see State.Carrier). PTT off also ends a tune carrier.
func (r *Radio) PTT(on bool) error { return r.ptt(0, on) }

func (r *Radio) ptt(origin uint64, on bool) error {
	if !on {
		return r.unkey(origin)
	}
	return r.change(origin, func(s *State) error {
		s.TX, s.Tune, s.TunePower = true, false, 0
		return r.checkTX(s, "transmit")
	})
}

// SwitchOff switches the radio off: any transmission stops, every setting is kept, the CAT
// servers answer nothing, and every change fails with ErrOff until SwitchOn.
func (r *Radio) SwitchOff() {
	r.mu.Lock()
	defer r.mu.Unlock()
	next := r.st
	next.On, next.TX, next.Tune, next.TunePower = false, false, false, 0
	r.commit(0, next)
}

// SwitchOn switches the radio back on with the settings it had.
func (r *Radio) SwitchOn() {
	r.mu.Lock()
	defer r.mu.Unlock()
	next := r.st
	next.On = true
	r.commit(0, next)
}

// checkTX refuses a state that transmits outside the transmit bands.
func (r *Radio) checkTX(s *State, what string) error {
	if s.TX && !r.o.transmits(s.Frequency()) {
		return fmt.Errorf("%s: %s: %w", what, s.Frequency(), ErrNoTransmit)
	}
	return nil
}

// change applies fn to a copy of the state and commits it if fn accepts it. origin names who
// asked (0 for the front panel, else a CAT session), so a session is not told of its own
// changes.
func (r *Radio) change(origin uint64, fn func(*State) error) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if !r.st.On {
		return ErrOff
	}
	next := r.st
	if err := fn(&next); err != nil {
		return err
	}
	r.commit(origin, next)
	return nil
}

// commit installs next and tells the subscribers what changed. Called with r.mu held, so the
// subscribers see the changes in the order they happened.
func (r *Radio) commit(origin uint64, next State) {
	c := diff(r.st, next)
	if r.o.Clock != nil && r.st.TX != next.TX {
		now := r.o.Clock.Now()
		if next.TX {
			// a key restarts the transmit sequence, cutting short what was left of the last
			r.keyedAt, r.tailUntil = now, time.Time{}
		} else if on, p := r.carrierAt(now); on && next.On {
			r.tailUntil, r.tailPower = now.Add(r.o.Unkey), p
		}
	}
	r.st = next
	if c == 0 {
		return
	}
	ev := Event{Changed: c, State: next, origin: origin}
	for s := range r.subs {
		s.deliver(ev)
	}
}

// newOrigin returns a fresh identity for a CAT session.
func (r *Radio) newOrigin() uint64 {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.lastOrigin++
	return r.lastOrigin
}
