package mech

import (
	"math"
	"math/rand/v2"
	"time"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/sim/vclock"
)

// streamPulses is the PCG stream of the step-jitter draws, apart from every other draw.
const streamPulses = 0x70756c736573 // "pulses"

// pulseJitter holds back pulses of the running move as UseStepJitter describes. Late pulses are
// drawn in pulse order, as geometric gaps between them, so a query only ever draws the late
// pulses up to the first one not yet released at its instant: the draws, and with them the run,
// do not depend on how often the drive is queried.
type pulseJitter struct {
	l    vclock.Lateness
	rng  *rand.Rand
	next int64         // number (1-based) of the running move's first late pulse not yet released
	by   time.Duration // its lateness
	last time.Duration // latest release, from the move's start, of a late pulse already released
}

// newPulseJitter returns nil for a lateness that never makes a pulse late.
func newPulseJitter(l vclock.Lateness) *pulseJitter {
	if l.P <= 0 {
		return nil
	}
	return &pulseJitter{l: l, rng: rand.New(rand.NewPCG(l.Seed, streamPulses))}
}

// start begins a move's schedule.
func (j *pulseJitter) start() {
	j.next, j.last = 0, 0
	j.draw()
}

// draw finds the next late pulse after j.next and its lateness.
func (j *pulseJitter) draw() {
	g := int64(1)
	if j.l.P < 1 {
		// Geometric gap by inverse transform, P(gap > k) = (1−P)^k, as lossStream draws.
		g = int64(math.Min(math.Floor(math.Log1p(-j.rng.Float64())/math.Log1p(-j.l.P))+1, math.MaxInt64/4))
	}
	j.next += g
	j.by = j.l.Sample(j.rng)
}

// held returns how many pulses have gone out el after the start of a move on plan p, whose plan
// has emitted k by then: k, unless a late pulse among the first k is still asleep, in which case
// only the pulses before it.
func (j *pulseJitter) held(p motion.Profile, el time.Duration, k int64) int64 {
	for j.next <= k {
		r := pulseTime(p, j.next) + j.by
		if r > el {
			return j.next - 1
		}
		j.last = max(j.last, r)
		j.draw()
	}
	return k
}

// advanceLate is advance for a drive with step jitter: the pulses released by el, and the end
// of the move once its plan is over and its last pulse has gone out.
func (m *Mechanics) advanceLate(el time.Duration, p motion.Profile) {
	k := m.jit.held(p, el, p.StepsAt(el))
	if k > m.emitted {
		m.pulses(m.emitted+1, k)
		m.emitted = k
	}
	if d := p.Duration(); el >= d && k == p.Total() {
		m.end(m.t0.Add(max(d, m.jit.last)))
	}
}

// pulseTime is the plan's instant for pulse k (1-based) of p: when its ideal trajectory reaches
// position k, the inverse of StepsAt, from the three phases Segments describes (textbook
// constant-acceleration kinematics: x = a·t²/2 while accelerating, then v·t, then the mirror).
// Rounded up to the nanosecond, so that StepsAt then counts the pulse to within float rounding.
func pulseTime(p motion.Profile, k int64) time.Duration {
	x1, x2, x3 := p.Segments()
	a, v := p.Accel, p.PeakSpeed()
	x := float64(k)
	if v <= 0 || x <= 0 {
		return 0
	}
	t1 := v / a
	var t float64
	switch {
	case x <= x1:
		t = math.Sqrt(2 * x / a)
	case x <= x2:
		t = t1 + (x-x1)/v
	default:
		t3 := t1 + (x2-x1)/v + v/a
		t = t3 - math.Sqrt(2*math.Max(x3-x, 0)/a)
	}
	return time.Duration(math.Ceil(t * float64(time.Second)))
}
