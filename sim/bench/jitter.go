package bench

import (
	"math/rand/v2"
	"time"

	"github.com/tankd/tankd/sim/vclock"
)

// Jitter is the scheduling jitter of a loaded single-board computer, as a test mode of the rig:
// the virtual clock wakes sleepers late now and then (every Sleep the controller, the coupler's
// conversions and the radio make), and the simulated drive's pulse generator emits pulses late
// against the move's plan, so that the count emitted at an instant lags what the controller's
// PositionAt assumes. Both are seeded, each by its own Seed. The zero value is off: the rig is
// then exactly as without the option.
type Jitter struct {
	Sleep vclock.Lateness // per sleep on the virtual clock; see vclock.Lateness
	Steps vclock.Lateness // per step pulse of the drive; see mech.Mechanics.UseStepJitter
}

// On reports whether any jitter is switched on.
func (j Jitter) On() bool { return j.Sleep.P > 0 || j.Steps.P > 0 }

// The loaded board's figures. They are from memory of cyclictest runs on Raspberry-Pi-class
// boards with a stock (not PREEMPT_RT) kernel and every core busy: most wake-ups within a
// hundred microseconds, a minority delayed by about a scheduler time slice, a long tail to ten or
// twenty milliseconds. A Go program adds its own scheduler and collector pauses, which are of
// the same order.
const (
	// loadedSleepP: the chance a sleep is noticeably late on a busy board.
	loadedSleepP = 0.2
	// loadedSleepMean: a late sleep's mean lateness, about one time slice.
	loadedSleepMean = time.Millisecond
	// loadedSleepMax: the longest lateness; the tail beyond is rare enough to leave out.
	loadedSleepMax = 20 * time.Millisecond
	// loadedTail is the Lomax shape of every lateness here: a heavy tail, as latency
	// histograms show, with a finite variance (shape above 2).
	loadedTail = 2.5
	// loadedStepP: the chance a pulse's wake-up is late. A pulse generator wakes thousands of
	// times a second; at 16,000 pulses/s this makes a few dozen late wake-ups a second, as many
	// as the scheduler's time slices let other tasks in.
	loadedStepP = 0.002
	// loadedStepMean and loadedStepMax: a pulse generator runs at a raised priority, so it is
	// held up less often and for shorter than an ordinary sleeper.
	loadedStepMean = 300 * time.Microsecond
	loadedStepMax  = 5 * time.Millisecond
)

// The overloaded board's figures: more runnable threads than cores, so that half the wake-ups
// wait for another thread's time slice. From memory of the Linux schedulers' defaults (a
// target latency of 6 ms scaled up with the number of cores for CFS, a 3 ms base slice for
// EEVDF): a few milliseconds on average, tens at worst.
const (
	heavySleepP    = 0.5
	heavySleepMean = 5 * time.Millisecond
	heavySleepMax  = 50 * time.Millisecond
	heavyStepP     = 0.01
	heavyStepMean  = time.Millisecond
	heavyStepMax   = 10 * time.Millisecond
)

// LoadedBoard is the jitter of a single-board computer running a general-purpose kernel with its
// CPU busy (the figures above), seeded by seed: the sleeps and the pulses draw from streams
// derived from it. The controller is expected to work as well under it as without.
func LoadedBoard(seed uint64) Jitter {
	s, p := jitterSeeds(seed)
	return Jitter{
		Sleep: vclock.Lateness{Seed: s, P: loadedSleepP, Mean: loadedSleepMean, Max: loadedSleepMax, Shape: loadedTail},
		Steps: vclock.Lateness{Seed: p, P: loadedStepP, Mean: loadedStepMean, Max: loadedStepMax, Shape: loadedTail},
	}
}

// HeavyLoad is the jitter of an overloaded board (the figures above), seeded by seed: harsher
// than LoadedBoard, to find what gives way first.
func HeavyLoad(seed uint64) Jitter {
	s, p := jitterSeeds(seed)
	return Jitter{
		Sleep: vclock.Lateness{Seed: s, P: heavySleepP, Mean: heavySleepMean, Max: heavySleepMax, Shape: loadedTail},
		Steps: vclock.Lateness{Seed: p, P: heavyStepP, Mean: heavyStepMean, Max: heavyStepMax, Shape: loadedTail},
	}
}

// jitterSeeds derives the sleeps' and the pulses' seeds from one.
func jitterSeeds(seed uint64) (sleep, pulses uint64) {
	r := rand.New(rand.NewPCG(seed, 0x6a6974746572)) // "jitter"
	return r.Uint64(), r.Uint64()
}
