package vclock

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"
)

// Lateness is a model of late wake-ups, as a general-purpose kernel gives them on a loaded
// single-board computer: a thread that asked to sleep for d is woken after d plus a lateness
// while another task holds the CPU, a timer interrupt is deferred or the Go runtime is busy.
//
// Each wake-up is late independently with probability P. A late one is late by a random amount:
// exponential with mean Mean (Shape 0), or, for the long tail that cyclictest-style latency
// histograms show under load (from memory), Lomax (Pareto type II) with shape Shape > 1 and the
// same mean before the cap, whose tail is the heavier the closer Shape is to 1. Every lateness
// is capped at Max; CappedMean is the mean a late wake-up really has after the cap. Draws come
// from a PCG stream seeded by Seed: the same seed and the same sequence of sleeps give the same
// latenesses.
//
// The zero value is an exact clock: no wake-up is late.
type Lateness struct {
	Seed  uint64
	P     float64       // chance that a wake-up is late, 0 to 1
	Mean  time.Duration // mean lateness of a late wake-up before the cap; > 0 when P > 0
	Max   time.Duration // cap on any lateness; 0: ten times Mean
	Shape float64       // 0: exponential; above 1: Lomax of that shape
}

// Validate reports every bad field at once.
func (l Lateness) Validate() error {
	var errs []error
	bad := func(key string, v any, want string) {
		errs = append(errs, fmt.Errorf("%s = %v: want %s", key, v, want))
	}
	if !(l.P >= 0 && l.P <= 1) {
		bad("P", l.P, "0 to 1")
	}
	if l.Mean < 0 || (l.P > 0 && l.Mean == 0) {
		bad("Mean", l.Mean, "> 0 when P > 0")
	}
	if l.Max < 0 {
		bad("Max", l.Max, ">= 0 (0: ten times Mean)")
	}
	if !(l.Shape == 0 || l.Shape > 1 && !math.IsInf(l.Shape, 0)) {
		// A Lomax tail of shape 1 or less has no mean, so Mean could not describe it.
		bad("Shape", l.Shape, "0 (exponential) or a finite number above 1")
	}
	if len(errs) > 0 {
		return fmt.Errorf("lateness: %w", errors.Join(errs...))
	}
	return nil
}

// Cap is the largest lateness: Max, or ten times Mean when Max is 0 (which trims an exponential
// lateness's mean by e⁻¹⁰, nothing to speak of).
func (l Lateness) Cap() time.Duration {
	if l.Max > 0 {
		return l.Max
	}
	return 10 * l.Mean
}

// CappedMean is the mean lateness of a late wake-up after the cap M: ∫₀ᴹ P(X > x) dx, which is
// μ·(1 − e^(−M/μ)) for the exponential and μ·(1 − (1 + M/λ)^(1−α)) for the Lomax of shape α
// and scale λ = μ·(α − 1). The mean lateness over all wake-ups is P times this.
func (l Lateness) CappedMean() time.Duration {
	mu, m := float64(l.Mean), float64(l.Cap())
	if mu <= 0 {
		return 0
	}
	if l.Shape == 0 {
		return time.Duration(mu * -math.Expm1(-m/mu))
	}
	a := l.Shape
	lambda := mu * (a - 1)
	return time.Duration(mu * (1 - math.Pow(1+m/lambda, 1-a)))
}

// Sample draws the lateness of one late wake-up from r: the distribution above, capped, in
// whole nanoseconds. Other simulated parts that wake late on their own schedule (sim/mech's
// pulse generator) draw from it too, so that one model serves them all.
func (l Lateness) Sample(r *rand.Rand) time.Duration {
	mu := float64(l.Mean)
	if mu <= 0 {
		return 0
	}
	u := r.Float64() // [0, 1): 1−u is never 0
	var x float64
	if l.Shape == 0 {
		x = -mu * math.Log1p(-u)
	} else {
		a := l.Shape
		x = mu * (a - 1) * (math.Pow(1-u, -1/a) - 1)
	}
	return time.Duration(math.Min(math.Round(x), float64(l.Cap())))
}

// Streams of the seeded generator, one per use, so that a user of one never shifts another's
// draws.
const (
	streamSleep = 0x736c656570 // "sleep"
)

// drawer decides, wake-up by wake-up, whether a sleep is late and by how much. It is not safe
// for concurrent use: the clock calls it under its lock.
type drawer struct {
	l   Lateness
	rng *rand.Rand
}

func newDrawer(l Lateness, stream uint64) *drawer {
	return &drawer{l: l, rng: rand.New(rand.NewPCG(l.Seed, stream))}
}

// next is the lateness of the next wake-up: 0 with chance 1−P.
func (d *drawer) next() time.Duration {
	if d.rng.Float64() >= d.l.P {
		return 0
	}
	return d.l.Sample(d.rng)
}
