package mech

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/sim/vclock"
)

// Errors the simulated drive returns, for errors.Is.
var (
	ErrBusy     = errors.New("simulated drive: a move is running")
	ErrDisabled = errors.New("simulated drive: motor disabled")
)

// ringFloor is what the settling ring has decayed to at SettleTime, in microsteps: under the
// 0.05 step that counts as at rest.
const ringFloor = 0.04

// Options configure the simulated drive train. Zero values take the documented defaults; the
// fault knobs default to off. Positions and distances are in microsteps of the motor, the shaft's
// measured through the gear (one shaft turn is PulsesPerTurn of them).
type Options struct {
	Seed uint64 // seeds every random draw; same seed and same calls, same run

	StepsPerRev int // motor full steps per revolution; default 200
	Microsteps  int // driver microsteps per full step; default 16
	GearRatio   int // motor turns per capacitor shaft turn; default 50

	Start      int64 // initial motor position; the shaft starts there too
	Backlash   int64 // dead band between motor and shaft; 0 = a stiff gear
	RandomPlay bool  // start the play at a seeded random point instead of centred

	PulloutSpeed  float64 // steps/s above which the motor loses pulses; default 10000
	MaxAccel      float64 // steps/s² above which ramps lose pulses; default 50000
	OverLimitLoss float64 // chance a pulse beyond those limits is lost; default 0.5
	MissRate      float64 // chance any pulse is lost; default 0

	// HardStops confine the shaft to [StopMin, StopMax] (a vacuum variable); driving into one
	// stalls the motor. Without, the shaft turns freely (an air variable).
	HardStops        bool
	StopMin, StopMax float64

	Home, Lower, Upper *SwitchOptions // nil: no such switch

	// SettleAmplitude is how far the shaft overshoots as a move ends, in microsteps; it then rings
	// back, a damped oscillation at RingFrequency. 0 = no ring.
	SettleAmplitude float64
	SettleTime      time.Duration    // the ring is below 0.05 step by then; default 50 ms
	RingFrequency   physic.Frequency // default 25 Hz

	SlipOnRelease bool  // releasing the motor lets the shaft slip
	SlipMax       int64 // largest slip on release, microsteps; default 100

	// StepJitter makes the pulse generator emit pulses late, as one in user space on a loaded
	// computer does; the zero value keeps every pulse on the plan. See UseStepJitter for the
	// model. It has its own Seed.
	StepJitter vclock.Lateness

	Name string // for logs; default "simulated drive"
}

// SwitchOptions place a switch on the capacitor shaft.
type SwitchOptions struct {
	At float64 // shaft position of the actuation point
	// Side is where of At the switch is actuated: Down (default) at or below At, Up at or above.
	Side motion.Direction
	// Hysteresis is how far the shaft must come back past At before the switch releases.
	Hysteresis  float64
	StuckActive bool // fault knob: always reads active
	NeverActive bool // fault knob: never reads active
}

func (o *Options) resolve() error {
	defInt := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	defFloat := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	defInt(&o.StepsPerRev, 200)
	defInt(&o.Microsteps, 16)
	defInt(&o.GearRatio, 50)
	defFloat(&o.PulloutSpeed, 10000)
	defFloat(&o.MaxAccel, 50000)
	defFloat(&o.OverLimitLoss, 0.5)
	if o.SettleTime == 0 {
		o.SettleTime = 50 * time.Millisecond
	}
	if o.RingFrequency == 0 {
		o.RingFrequency = 25 * physic.Hertz
	}
	if o.SlipMax == 0 {
		o.SlipMax = 100
	}
	if o.Name == "" {
		o.Name = "simulated drive"
	}
	var errs []error
	bad := func(key string, v any, want string) {
		errs = append(errs, fmt.Errorf("%s = %v: want %s", key, v, want))
	}
	if o.StepsPerRev < 0 || o.Microsteps < 0 || o.GearRatio < 0 {
		bad("StepsPerRev/Microsteps/GearRatio", []int{o.StepsPerRev, o.Microsteps, o.GearRatio}, "positive")
	}
	if o.Backlash < 0 {
		bad("Backlash", o.Backlash, ">= 0")
	}
	if !(o.PulloutSpeed > 0) {
		bad("PulloutSpeed", o.PulloutSpeed, "> 0 steps/s")
	}
	if !(o.MaxAccel > 0) {
		bad("MaxAccel", o.MaxAccel, "> 0 steps/s²")
	}
	if !(o.OverLimitLoss > 0 && o.OverLimitLoss <= 1) {
		bad("OverLimitLoss", o.OverLimitLoss, "in (0, 1]")
	}
	if !(o.MissRate >= 0 && o.MissRate < 1) {
		bad("MissRate", o.MissRate, "in [0, 1)")
	}
	if o.HardStops && !(o.StopMin < o.StopMax && float64(o.Start) >= o.StopMin && float64(o.Start) <= o.StopMax) {
		bad("StopMin/StopMax", []float64{o.StopMin, o.StopMax}, fmt.Sprintf("StopMin < StopMax around Start (%d)", o.Start))
	}
	if o.SettleAmplitude < 0 || o.SettleTime < 0 || o.RingFrequency < 0 {
		bad("SettleAmplitude/SettleTime/RingFrequency", o.SettleAmplitude, ">= 0")
	}
	if o.SlipMax < 0 {
		bad("SlipMax", o.SlipMax, ">= 0")
	}
	if err := o.StepJitter.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("StepJitter: %w", err))
	}
	for _, s := range []struct {
		key string
		o   **SwitchOptions
	}{{"Home", &o.Home}, {"Lower", &o.Lower}, {"Upper", &o.Upper}} {
		if *s.o == nil {
			continue
		}
		c := **s.o // a copy: defaults must not write into the caller's struct
		*s.o = &c
		if c.Side == 0 {
			c.Side = motion.Down
		}
		if c.Side != motion.Up && c.Side != motion.Down {
			bad(s.key+".Side", int(c.Side), "+1 or -1")
		}
		if c.Hysteresis < 0 {
			bad(s.key+".Hysteresis", c.Hysteresis, ">= 0")
		}
	}
	if len(errs) > 0 {
		return fmt.Errorf("mechanics options: %w", errors.Join(errs...))
	}
	return nil
}

// Mechanics is the simulated drive train: a stepper, a gear with play, the capacitor shaft with
// optional hard stops, and switches on the shaft. It implements motion.Drive.
//
// Nothing runs in the background: every query computes the state at the clock's now from the
// running move's Profile, processing only the pulses emitted since the last query, so a query is
// O(1) amortised. Lost pulses are drawn as geometric gaps between losses, one seeded stream for
// ordinary pulses and one for pulses beyond the motor's limits, so the outcome does not depend on
// how often the state is queried. It is safe for concurrent use.
type Mechanics struct {
	clk clock.Clock
	o   Options

	mu      sync.Mutex
	normal  lossStream // pulses within the motor's limits
	over    lossStream // pulses beyond them
	slipRNG *rand.Rand
	enabled bool

	running     bool
	mv          motion.Move
	t0          time.Time
	emitted     int64       // pulses of the current or last move
	overRuns    []pulseSpan // pulses of the current move beyond the motor's limits, sorted
	stalledMove bool        // the current move has driven into a stop
	shaft0      float64     // shaft at the start of the current move

	motor   int64
	shaft   float64 // quasi-static: without the ring
	lost    int64
	stalls  int
	stalled int64 // pulses that met the shaft held at a stop

	jit *pulseJitter // nil: every pulse on the plan

	ringing bool
	ringAt  time.Time
	ringDir float64
	tau     float64 // ring decay time constant, s
	omega   float64 // ring angular frequency, rad/s

	switches [3]*Switch // home, lower, upper
}

// New returns the mechanics at rest with the motor released, on clk.
func New(clk clock.Clock, opts Options) (*Mechanics, error) {
	if clk == nil {
		return nil, errors.New("new mechanics: clock is required")
	}
	if err := opts.resolve(); err != nil {
		return nil, fmt.Errorf("new mechanics: %w", err)
	}
	m := &Mechanics{clk: clk, o: opts, motor: opts.Start, shaft: float64(opts.Start)}
	seed := rand.NewPCG(opts.Seed, 0x6d656368)
	// One stream per use, so that the draws of one never shift another's: the pattern of losses
	// then does not depend on how the pulse classes interleave or how often the state is read.
	m.normal = newLossStream(rand.New(rand.NewPCG(seed.Uint64(), 1)), opts.MissRate)
	m.over = newLossStream(rand.New(rand.NewPCG(seed.Uint64(), 2)),
		1-(1-opts.MissRate)*(1-opts.OverLimitLoss))
	m.slipRNG = rand.New(rand.NewPCG(seed.Uint64(), 3))
	m.jit = newPulseJitter(opts.StepJitter)
	if opts.RandomPlay && opts.Backlash > 0 {
		m.shaft += (m.slipRNG.Float64() - 0.5) * float64(opts.Backlash)
	}
	m.shaft = m.clampShaft(m.shaft)
	if a := opts.SettleAmplitude; a > ringFloor {
		m.tau = opts.SettleTime.Seconds() / math.Log(a/ringFloor)
	} else {
		m.tau = opts.SettleTime.Seconds()
	}
	m.omega = 2 * math.Pi * float64(opts.RingFrequency) / float64(physic.Hertz)
	for i, so := range []*SwitchOptions{opts.Home, opts.Lower, opts.Upper} {
		if so == nil {
			continue
		}
		s := &Switch{m: m, o: *so, name: []string{"home", "lower limit", "upper limit"}[i] + " switch"}
		s.on = s.o.Side == motion.Down && m.shaft <= so.At || s.o.Side == motion.Up && m.shaft >= so.At
		m.switches[i] = s
	}
	return m, nil
}

// PulsesPerTurn returns the pulses that turn the capacitor shaft once:
// StepsPerRev·Microsteps·GearRatio.
func (m *Mechanics) PulsesPerTurn() int64 {
	return int64(m.o.StepsPerRev) * int64(m.o.Microsteps) * int64(m.o.GearRatio)
}

// Switches returns the switches on the shaft for motion.NewAxis; absent ones are nil.
func (m *Mechanics) Switches() motion.Switches {
	var sw motion.Switches
	// Assigned one by one so that an absent switch is a nil interface, not a nil *Switch.
	if s := m.switches[0]; s != nil {
		sw.Home = s
	}
	if s := m.switches[1]; s != nil {
		sw.Lower = s
	}
	if s := m.switches[2]; s != nil {
		sw.Upper = s
	}
	return sw
}

// String implements motion.Drive.
func (m *Mechanics) String() string { return m.o.Name }

// Start implements motion.Drive.
func (m *Mechanics) Start(mv motion.Move) error {
	m.mu.Lock()
	defer m.mu.Unlock()
	now := m.clk.Now()
	m.advance(now)
	switch {
	case m.running:
		return ErrBusy
	case !m.enabled:
		return ErrDisabled
	case mv.Dir != motion.Up && mv.Dir != motion.Down:
		return fmt.Errorf("simulated drive: direction %d", mv.Dir)
	}
	if err := mv.Profile.Validate(); err != nil {
		return fmt.Errorf("simulated drive: %w", err)
	}
	m.mv, m.t0, m.emitted, m.running = mv, now, 0, true
	m.stalledMove, m.shaft0, m.ringing = false, m.shaft, false
	m.overRuns = m.overLimit(mv.Profile)
	if m.jit != nil {
		m.jit.start()
	}
	m.advance(now)
	return nil
}

// Progress implements motion.Drive.
func (m *Mechanics) Progress() (emitted int64, running bool) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	return m.emitted, m.running
}

// Stop implements motion.Drive.
func (m *Mechanics) Stop(ramp bool) {
	m.mu.Lock()
	defer m.mu.Unlock()
	now := m.clk.Now()
	m.advance(now)
	if !m.running {
		return
	}
	if !ramp {
		m.end(now)
		return
	}
	m.mv.Profile = m.mv.Profile.StopAt(now.Sub(m.t0))
	m.overRuns = m.overLimit(m.mv.Profile)
	m.advance(now)
}

// Enable implements motion.Drive. Releasing the motor ends a running move at once; with
// SlipOnRelease the shaft then slips by up to SlipMax.
func (m *Mechanics) Enable(on bool) error {
	m.mu.Lock()
	defer m.mu.Unlock()
	now := m.clk.Now()
	m.advance(now)
	if on || !m.enabled {
		m.enabled = on
		return nil
	}
	m.release(now)
	return nil
}

// Halt implements motion.Drive: stop at once and release.
func (m *Mechanics) Halt() error {
	m.mu.Lock()
	defer m.mu.Unlock()
	now := m.clk.Now()
	m.advance(now)
	if m.enabled {
		m.release(now)
	}
	return nil
}

func (m *Mechanics) release(now time.Time) {
	if m.running {
		m.end(now)
	}
	m.enabled = false
	if m.o.SlipOnRelease && m.o.SlipMax > 0 {
		m.slip(m.slipRNG.Int64N(2*m.o.SlipMax+1) - m.o.SlipMax)
	}
}

// Slip turns the shaft, and the motor with it, by n microsteps behind the controller's back
// (fault injection). The hard stops still hold.
func (m *Mechanics) Slip(n int64) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	m.slip(n)
}

func (m *Mechanics) slip(n int64) {
	s := m.clampShaft(m.shaft + float64(n))
	moved := int64(math.Round(s - m.shaft))
	m.motor += moved
	m.setShaft(s)
}

// Restore puts the mechanics at rest where an earlier run left them: the rotor at motor
// microsteps and the shaft at shaft (clamped to the stops), as a real capacitor stays where it
// was left. Switches follow. It is refused while a move runs.
func (m *Mechanics) Restore(motor int64, shaft float64) error {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	if m.running {
		return errors.New("mechanics: restore during a move")
	}
	if math.IsNaN(shaft) || math.IsInf(shaft, 0) {
		return fmt.Errorf("mechanics: restore: shaft %v", shaft)
	}
	m.motor = motor
	m.ringing = false
	m.setShaft(m.clampShaft(shaft))
	return nil
}

// Shaft returns the capacitor shaft position at the clock's now, in microsteps, with the gear
// play and any settling ring.
func (m *Mechanics) Shaft() float64 {
	m.mu.Lock()
	defer m.mu.Unlock()
	now := m.clk.Now()
	m.advance(now)
	if !m.ringing {
		return m.shaft
	}
	dt := now.Sub(m.ringAt)
	if dt >= m.o.SettleTime {
		m.ringing = false
		return m.shaft
	}
	t := dt.Seconds()
	return m.clampShaft(m.shaft + m.ringDir*m.o.SettleAmplitude*math.Exp(-t/m.tau)*math.Cos(m.omega*t))
}

// MotorPosition returns the rotor's true position in microsteps: the pulses that moved it.
func (m *Mechanics) MotorPosition() int64 {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	return m.motor
}

// LostSteps returns the pulses emitted that did not move the motor.
func (m *Mechanics) LostSteps() int64 {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	return m.lost
}

// Stalls returns how many moves drove the motor into a hard stop.
func (m *Mechanics) Stalls() int {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	return m.stalls
}

// StalledPulses returns how many pulses would have turned the motor but met the shaft held at a
// hard stop with the gear play already wound up: the pulses a stalled motor receives, which
// strain the capacitor's end stop. (Pulses the motor lost anyway, at a speed or acceleration
// beyond it or by MissRate, are LostSteps only.) Stalls counts the moves they came in.
func (m *Mechanics) StalledPulses() int64 {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	return m.stalled
}

// UseStepJitter installs (or, with a zero l, removes) step-timing jitter, between moves (ErrBusy
// during one). It is for a caller that did not build the Options, such as a test rig around a
// station.
//
// The model is a pulse generator in user space that times each pulse against the move's start
// (an absolute schedule, as clock_nanosleep with TIMER_ABSTIME gives): before each pulse it
// sleeps until the plan's instant for it, and that wake-up is late as l says (chance l.P per
// pulse, a capped lateness of mean l.Mean). A pulse can go no earlier than the one before it,
// so a late wake-up holds back every pulse planned while it slept, and when the thread runs
// again it emits them at once and carries on with the plan. Thus:
//
//   - pulse k goes out at max over j ≤ k of (plan's instant for j + lateness of j): late by at
//     most l.Cap(), never early;
//   - Progress at an instant reports at most the plan's count then, and at least the plan's
//     count l.Cap() earlier;
//   - a move emits exactly its planned pulses (Stop(false) aside) and ends at most l.Cap()
//     after its plan does.
//
// Which pulses are lost (MissRate, pull-out, MaxAccel) is still decided on the plan's speed at
// each pulse: the model assumes the motor follows a catch-up burst, as it does while the burst
// stays within the rotor's lag margin of a full step or two; a burst past that would lose
// steps on real hardware, which the model leaves out. The draws come from their own stream
// seeded by l.Seed, pulse by pulse, so they do not depend on how often the drive is queried.
func (m *Mechanics) UseStepJitter(l vclock.Lateness) error {
	if err := l.Validate(); err != nil {
		return fmt.Errorf("simulated drive: step jitter: %w", err)
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	if m.running {
		return fmt.Errorf("step jitter: %w", ErrBusy)
	}
	m.o.StepJitter = l
	m.jit = newPulseJitter(l)
	return nil
}

// Moving reports whether a move is running.
func (m *Mechanics) Moving() bool {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.advance(m.clk.Now())
	return m.running
}

// advance brings the state up to now: the pulses the running move has emitted since the last
// call, and the end of the move if it is over.
func (m *Mechanics) advance(now time.Time) {
	if !m.running {
		return
	}
	el := now.Sub(m.t0)
	p := m.mv.Profile
	if m.jit != nil {
		m.advanceLate(el, p)
		return
	}
	if k := p.StepsAt(el); k > m.emitted {
		m.pulses(m.emitted+1, k)
		m.emitted = k
	}
	if d := p.Duration(); el >= d {
		m.end(m.t0.Add(d))
	}
}

// end finishes the move at instant at; if the shaft moved, it rings from then on.
func (m *Mechanics) end(at time.Time) {
	m.running = false
	if m.o.SettleAmplitude > 0 && m.shaft != m.shaft0 {
		m.ringing, m.ringAt = true, at
		m.ringDir = math.Copysign(1, m.shaft-m.shaft0)
	}
}

// pulses applies pulses from..to (1-based, inclusive) of the running move.
func (m *Mechanics) pulses(from, to int64) {
	var lost int64
	for k := from; k <= to; {
		over, last := m.classify(k)
		last = min(last, to)
		if over {
			lost += m.over.take(last - k + 1)
		} else {
			lost += m.normal.take(last - k + 1)
		}
		k = last + 1
	}
	eff := to - from + 1 - lost
	dir := int64(m.mv.Dir)
	half := float64(m.o.Backlash) / 2
	if m.o.HardStops {
		// The motor can wind into the play past the shaft's stop, then no further.
		var room int64
		if dir > 0 {
			room = int64(math.Floor(m.o.StopMax+half)) - m.motor
		} else {
			room = m.motor - int64(math.Ceil(m.o.StopMin-half))
		}
		room = max(room, 0)
		if eff > room {
			lost += eff - room
			m.stalled += eff - room
			eff = room
			if !m.stalledMove {
				m.stalledMove = true
				m.stalls++
			}
		}
	}
	m.lost += lost
	m.motor += dir * eff
	s := m.shaft
	if dir > 0 {
		s = math.Max(s, float64(m.motor)-half)
	} else {
		s = math.Min(s, float64(m.motor)+half)
	}
	m.setShaft(m.clampShaft(s))
}

func (m *Mechanics) clampShaft(s float64) float64 {
	if m.o.HardStops {
		return math.Min(math.Max(s, m.o.StopMin), m.o.StopMax)
	}
	return s
}

// setShaft moves the quasi-static shaft monotonically to s and updates the switches. Within one
// move the shaft only goes one way, so the end points decide each switch's hysteresis.
func (m *Mechanics) setShaft(s float64) {
	for _, sw := range m.switches {
		if sw != nil {
			sw.follow(m.shaft, s)
		}
	}
	m.shaft = s
}

// pulseSpan is a run of pulse numbers, inclusive.
type pulseSpan struct{ lo, hi int64 }

// overLimit returns the pulses of p that the motor cannot follow reliably: those faster than the
// pull-out speed, and those in ramps steeper than MaxAccel.
func (m *Mechanics) overLimit(p motion.Profile) []pulseSpan {
	accelEnd, decelStart, end := p.Segments()
	total := p.Total()
	var spans []pulseSpan
	if p.Accel > m.o.MaxAccel {
		spans = append(spans,
			pulseSpan{1, int64(math.Floor(accelEnd))},
			pulseSpan{int64(math.Floor(decelStart)) + 1, total})
	}
	if p.PeakSpeed() > m.o.PulloutSpeed {
		// Speed passes the pull-out speed P at s = P²/2a into the move and again as far from
		// its end (textbook kinematics).
		x := m.o.PulloutSpeed * m.o.PulloutSpeed / (2 * p.Accel)
		spans = append(spans, pulseSpan{int64(math.Floor(x)) + 1, int64(math.Ceil(end-x)) - 1})
	}
	sort.Slice(spans, func(i, j int) bool { return spans[i].lo < spans[j].lo })
	var merged []pulseSpan
	for _, s := range spans {
		s.lo, s.hi = max(s.lo, 1), min(s.hi, total)
		if s.lo > s.hi {
			continue
		}
		if n := len(merged); n > 0 && s.lo <= merged[n-1].hi+1 {
			merged[n-1].hi = max(merged[n-1].hi, s.hi)
			continue
		}
		merged = append(merged, s)
	}
	return merged
}

// classify says whether pulse k is beyond the motor's limits and the last pulse after it that
// is in the same class.
func (m *Mechanics) classify(k int64) (over bool, last int64) {
	for _, s := range m.overRuns {
		if k > s.hi {
			continue
		}
		if k >= s.lo {
			return true, s.hi
		}
		return false, s.lo - 1
	}
	return false, math.MaxInt64
}

// lossStream decides which pulses of a class are lost, each independently with chance q,
// drawing only the gaps between losses.
type lossStream struct {
	rng  *rand.Rand
	q    float64
	seen int64 // pulses of this class so far
	next int64 // number of the next lost one
}

func newLossStream(rng *rand.Rand, q float64) lossStream {
	l := lossStream{rng: rng, q: q}
	l.next = l.gap()
	return l
}

// gap draws the distance to the next lost pulse, >= 1: geometric with parameter q.
func (l *lossStream) gap() int64 {
	switch {
	case l.q <= 0:
		return math.MaxInt64 / 2
	case l.q >= 1:
		return 1
	}
	// Inverse transform: P(gap > k) = (1−q)^k.
	g := math.Floor(math.Log1p(-l.rng.Float64())/math.Log1p(-l.q)) + 1
	return int64(math.Min(g, math.MaxInt64/4))
}

// take passes n more pulses of the class and returns how many of them are lost.
func (l *lossStream) take(n int64) (lost int64) {
	end := l.seen + n
	for l.next <= end {
		lost++
		l.next += l.gap()
	}
	l.seen = end
	return lost
}

// Switch is a switch on the capacitor shaft. It implements motion.Switch.
type Switch struct {
	m    *Mechanics
	o    SwitchOptions
	name string
	on   bool // guarded by m.mu
}

// follow updates the switch for a monotone shaft motion from s0 to s1.
func (s *Switch) follow(s0, s1 float64) {
	side := float64(s.o.Side)
	// Distances past the actuation point on the actuated side.
	d0, d1 := side*(s0-s.o.At), side*(s1-s.o.At)
	switch {
	case d1 > d0 && d1 >= 0:
		s.on = true
	case d1 < d0 && d1 < -s.o.Hysteresis:
		s.on = false
	}
}

// Active implements motion.Switch.
func (s *Switch) Active() (bool, error) {
	s.m.mu.Lock()
	defer s.m.mu.Unlock()
	s.m.advance(s.m.clk.Now())
	return (s.on || s.o.StuckActive) && !s.o.NeverActive, nil
}

// String implements motion.Switch.
func (s *Switch) String() string { return s.name }
