package motion

import (
	"errors"
	"fmt"
	"iter"
	"math"
	"time"
)

// ErrBadProfile reports a move that cannot be planned: a negative pulse count, a speed or
// acceleration that is not a positive finite number, or a move too long to time.
var ErrBadProfile = errors.New("bad motion profile")

// maxPlanSeconds bounds a plan's duration far inside time.Duration's range; no real move of the
// capacitor takes anywhere near this long.
const maxPlanSeconds = 1e6

// firstStepCorrection is the first-step correction of the real-time linear-ramp step timing: it makes the
// recursive delays match the exact inter-step times from the second step on.
const firstStepCorrection = 0.676

// Profile plans one move from rest to rest: accelerate at Accel, cruise at MaxSpeed if there is
// room (trapezoid) or turn round at the peak (triangle), decelerate, emitting Steps pulses.
//
// A Profile is a value: StopAt returns a changed copy. All its time queries are O(1), so that a
// simulator can ask for the position at every ADC sample; a profile made by Plan or StopAt
// computes its trajectory once, so that the queries the axis and a drive make at every poll
// cost a few comparisons.
type Profile struct {
	Steps    int64   // pulses to emit, >= 0
	MaxSpeed float64 // steps per second, > 0
	Accel    float64 // steps per second squared, > 0

	// stop, when stopped, is the time from which the move ramps down early (see StopAt).
	stop    time.Duration
	stopped bool

	// traj is the trajectory of the fields above, shared by the copies of a profile and never
	// changed; nil in a Profile literal, whose queries compute it afresh. It is used only while
	// the fields still match what it was computed from.
	traj *trajectory
}

// trajectory is a profile's shape and duration, computed once.
type trajectory struct {
	key      profileKey
	s        shape
	duration time.Duration // Duration
}

// profileKey is what a trajectory is computed from.
type profileKey struct {
	steps           int64
	maxSpeed, accel float64
	stop            time.Duration
	stopped         bool
}

func (p *Profile) key() profileKey {
	return profileKey{steps: p.Steps, maxSpeed: p.MaxSpeed, accel: p.Accel, stop: p.stop, stopped: p.stopped}
}

// trajectory returns p's trajectory: the one computed with it if the fields still match, or
// one computed into scratch.
func (p *Profile) trajectory(scratch *trajectory) *trajectory {
	if t := p.traj; t != nil && t.key == p.key() {
		return t
	}
	scratch.compute(p)
	return scratch
}

func (t *trajectory) compute(p *Profile) {
	t.key = p.key()
	t.s = p.shape()
	// Rounded up, so that at Duration the ideal trajectory has certainly arrived.
	t.duration = time.Duration(math.Ceil(t.s.t3 * float64(time.Second)))
}

// withTrajectory returns p with its trajectory computed.
func (p Profile) withTrajectory() Profile {
	t := new(trajectory)
	t.compute(&p)
	p.traj = t
	return p
}

// Plan returns the profile of a move of steps pulses, or an error wrapping ErrBadProfile.
func Plan(steps int64, maxSpeed, accel float64) (Profile, error) {
	p := Profile{Steps: steps, MaxSpeed: maxSpeed, Accel: accel}.withTrajectory()
	if err := p.Validate(); err != nil {
		return Profile{}, err
	}
	return p, nil
}

// Validate reports whether p can be executed. Profiles made by Plan are valid; a drive that is
// handed a Profile literal should check it.
func (p Profile) Validate() error {
	var errs []error
	if p.Steps < 0 {
		errs = append(errs, fmt.Errorf("steps %d below 0", p.Steps))
	}
	if !(p.MaxSpeed > 0) || math.IsInf(p.MaxSpeed, 0) {
		errs = append(errs, fmt.Errorf("speed %v steps/s not a positive finite number", p.MaxSpeed))
	}
	if !(p.Accel > 0) || math.IsInf(p.Accel, 0) {
		errs = append(errs, fmt.Errorf("acceleration %v steps/s² not a positive finite number", p.Accel))
	}
	if len(errs) == 0 {
		var scratch trajectory
		if t := p.trajectory(&scratch).s.t3; t > maxPlanSeconds {
			errs = append(errs, fmt.Errorf("move of %d steps would take %.0f s, over %.0f s", p.Steps, t, float64(maxPlanSeconds)))
		}
	}
	if len(errs) > 0 {
		return fmt.Errorf("plan move: %w: %w", ErrBadProfile, errors.Join(errs...))
	}
	return nil
}

// shape is a profile's trajectory in three phases, in seconds and pulses from the start:
// acceleration over [0, t1) to position x1 and speed v1, cruise at v1 over [t1, t2) to x2, and
// deceleration at a over [t2, t3) to rest at x3. An early stop is folded in by moving t2.
type shape struct {
	a, v1      float64
	t1, t2, t3 float64
	x1, x2, x3 float64
	cut        bool // an early stop shortened the move
	total      int64
}

func (p Profile) shape() shape {
	s := shape{a: p.Accel}
	if p.Steps <= 0 || !(p.MaxSpeed > 0) || !(p.Accel > 0) {
		return s
	}
	a, v, n := p.Accel, p.MaxSpeed, float64(p.Steps)
	if n*a >= v*v { // room to reach MaxSpeed: trapezoid (textbook s = v²/2a per ramp)
		s.v1 = v
		s.t1 = v / a
		s.x1 = v * v / (2 * a)
		s.x2 = n - s.x1
		s.t2 = s.t1 + (s.x2-s.x1)/v
	} else { // triangle: turn round halfway at v = sqrt(n·a)
		s.v1 = math.Sqrt(n * a)
		s.t1 = s.v1 / a
		s.x1 = n / 2
		s.x2 = s.x1
		s.t2 = s.t1
	}
	s.t3 = s.t2 + s.t1
	s.x3 = n
	s.total = p.Steps
	if !p.stopped {
		return s
	}
	ts := p.stop.Seconds()
	switch {
	case ts >= s.t2:
		// Already decelerating at Accel: a ramped stop changes nothing.
		return s
	case ts <= 0:
		return shape{a: a, cut: true}
	case ts < s.t1:
		s.t1, s.v1 = ts, a*ts
		s.x1 = a * ts * ts / 2
		s.t2, s.x2 = ts, s.x1
	default:
		s.x2 = s.position(ts)
		s.t2 = ts
	}
	s.t3 = s.t2 + s.v1/a
	s.x3 = math.Min(s.x2+s.v1*s.v1/(2*a), n)
	s.cut = true
	s.total = min(int64(math.Floor(s.x3)), p.Steps)
	return s
}

// position is the ideal trajectory at t seconds. Each phase's formula is monotone in t even in
// floating point, and clamping each phase to its end positions keeps the joins monotone too.
func (s *shape) position(t float64) float64 {
	switch {
	case t <= 0:
		return 0
	case t < s.t1:
		return min(s.a*t*t/2, s.x1)
	case t < s.t2:
		return min(max(s.x1+s.v1*(t-s.t1), s.x1), s.x2)
	case t < s.t3:
		d := s.t3 - t
		return min(max(s.x3-s.a*d*d/2, s.x2), s.x3)
	default:
		return s.x3
	}
}

func (s *shape) speed(t float64) float64 {
	switch {
	case t <= 0:
		return 0
	case t < s.t1:
		return s.a * t
	case t < s.t2:
		return s.v1
	case t < s.t3:
		return s.a * (s.t3 - t)
	default:
		return 0
	}
}

func seconds(t time.Duration) float64 { return float64(t) / float64(time.Second) }

// Duration returns the time from the start to the last pulse, where the move comes to rest. A
// move shortened by StopAt rests a little after its last pulse, since its ramp need not end on a
// whole step.
func (p Profile) Duration() time.Duration {
	var scratch trajectory
	return p.trajectory(&scratch).duration
}

// StepsAt returns the pulses emitted t after the start: the ideal constant-acceleration
// trajectory, floored; 0 for t <= 0 and Total for t >= Duration.
func (p Profile) StepsAt(t time.Duration) int64 {
	if t <= 0 {
		return 0
	}
	var scratch trajectory
	tr := p.trajectory(&scratch)
	if t >= tr.duration {
		return tr.s.total
	}
	return min(int64(math.Floor(tr.s.position(seconds(t)))), tr.s.total)
}

// positionAt is the unfloored trajectory t after the start, ending on the last pulse.
func (p Profile) positionAt(t time.Duration) float64 {
	var scratch trajectory
	s := &p.trajectory(&scratch).s
	return min(s.position(seconds(t)), float64(s.total))
}

// SpeedAt returns the planned speed t after the start, in steps per second.
func (p Profile) SpeedAt(t time.Duration) float64 {
	var scratch trajectory
	return p.trajectory(&scratch).s.speed(seconds(t))
}

// PeakSpeed returns the highest speed the move reaches, in steps per second.
func (p Profile) PeakSpeed() float64 {
	var scratch trajectory
	return p.trajectory(&scratch).s.v1
}

// Total returns the pulses the move emits: Steps, or fewer after StopAt.
func (p Profile) Total() int64 {
	var scratch trajectory
	return p.trajectory(&scratch).s.total
}

// Segments returns where, in pulses from the start along the ideal trajectory, the move stops
// accelerating, starts decelerating, and comes to rest. Speed rises before accelEnd, is constant
// up to decelStart and falls after it; the speed at position x in the closing ramp is
// sqrt(2·Accel·(end−x)). A simulator uses this to tell which pulses were demanding.
func (p Profile) Segments() (accelEnd, decelStart, end float64) {
	var scratch trajectory
	s := &p.trajectory(&scratch).s
	return s.x1, s.x2, s.x3
}

// StopAt returns the same move, but from t on it decelerates at Accel from its speed at t to rest
// (a ramped stop). A stop at or before the start cancels the move; a stop after the move already
// began its closing ramp changes nothing; of two stops the earlier counts.
func (p Profile) StopAt(t time.Duration) Profile {
	if p.stopped && p.stop <= t {
		return p
	}
	p.stop, p.stopped = t, true
	if p.traj != nil {
		// a planned profile stays planned
		return p.withTrajectory()
	}
	return p
}

// Delays returns the delay before each pulse, Total of them, computed by the real-time
// linear-ramp step timing of D. Austin ("Generate stepper-motor speed profiles in real time",
// Embedded Systems Programming, 2005): the first delay is c0 = 0.676·sqrt(2/Accel), each next one
// c_n = c_{n−1} − 2·c_{n−1}/(4n+1) while accelerating, 1/MaxSpeed at cruise, and the closing ramp
// is the opening one mirrored. It needs no square root per step, which is why a pulse generator
// on a small computer can follow it in real time. Because of the first-step correction the sum of
// the delays falls short of Duration by about 0.65·sqrt(2/Accel).
func (p Profile) Delays() iter.Seq[time.Duration] {
	return func(yield func(time.Duration) bool) {
		var scratch trajectory
		s := p.trajectory(&scratch).s
		total := s.total
		if total <= 0 {
			return
		}
		cmin := 1 / p.MaxSpeed
		c := firstStepCorrection * math.Sqrt(2/p.Accel)
		ramping := true
		// First pulse of the closing ramp. Until the opening ramp's length is known, assume a
		// triangle; an early stop fixes it at the pulse where the stop begins.
		down := total - total/2 + 1
		if s.cut {
			down = min(int64(math.Floor(s.x2))+1, total+1)
		}
		var cd, prev float64 // closing-ramp delay and the delay last emitted
		for k := int64(1); k <= total; k++ {
			var d float64
			if k < down {
				if ramping && c <= cmin {
					ramping = false
					if !s.cut {
						down = total - min(k-1, total/2) + 1
					}
				}
				if ramping {
					d = c
					c -= 2 * c / float64(4*k+1)
				} else {
					d = cmin
				}
			}
			if k >= down {
				j := total - k // mirror: pulse k gets the opening ramp's c_j
				if k == down {
					cd = firstStepCorrection * math.Sqrt(2/p.Accel)
					for i := int64(1); i <= j; i++ {
						cd -= 2 * cd / float64(4*i+1)
					}
				} else {
					// Undo one step of the recursion: c_j = c_{j+1}·(4(j+1)+1)/(4(j+1)−1).
					cd *= float64(4*(j+1)+1) / float64(4*(j+1)-1)
				}
				d = math.Max(math.Max(cd, prev), cmin)
			}
			prev = d
			if !yield(time.Duration(math.Round(d * float64(time.Second)))) {
				return
			}
		}
	}
}
