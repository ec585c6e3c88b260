package tune

import (
	"context"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"
)

// guard is an operation's context. Besides its parent's cancellation it enforces what only the
// tuner knows: the operation's time limit and its carrier-time cap, on the injected clock, and,
// while the carrier is needed, that the radio stays on the frequency being tuned. Its Err polls
// those conditions, and every wait in the operation (the axis's motor polls and settling, the
// coupler's readings, the carrier wait) goes through Err, so a breach ends the operation at the
// next poll, also in the middle of a move, on the virtual clock as on the wall clock. Once Err
// has reported a breach, Done is closed and Err keeps returning the same error.
type guard struct {
	parent context.Context
	t      *Tuner
	stop   func() bool // unregisters the parent watch

	mu       sync.Mutex
	err      error
	done     chan struct{}
	deadline time.Time
	armed    bool             // RF stages: the frequency is watched
	freq     physic.Frequency // the frequency being tuned
	rfSince  time.Time        // carrier needed since (zero: not now)
	rfUsed   time.Duration    // carrier time already used by earlier RF stages
	moved    physic.Frequency // the radio's frequency when it was found off (0: never)
	limit    time.Duration    // the carrier-time cap
}

func newGuard(parent context.Context, t *Tuner, f physic.Frequency, deadline time.Time) *guard {
	g := &guard{parent: parent, t: t, done: make(chan struct{}), deadline: deadline, freq: f, limit: t.o.CarrierLimit}
	g.stop = context.AfterFunc(parent, func() { g.trip(parent.Err()) })
	return g
}

// Deadline implements context.Context: the parent's (the tuner's own limit is on its clock,
// which may be virtual, so it is not a wall-clock deadline).
func (g *guard) Deadline() (time.Time, bool) { return g.parent.Deadline() }

// Done implements context.Context.
func (g *guard) Done() <-chan struct{} { return g.done }

// Value implements context.Context.
func (g *guard) Value(key any) any { return g.parent.Value(key) }

// Err implements context.Context: the parent's error, or the first breach of the operation's
// limits.
func (g *guard) Err() error {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.err != nil {
		return g.err
	}
	if err := g.parent.Err(); err != nil {
		return g.tripLocked(err)
	}
	if err := g.breach(); err != nil {
		return g.tripLocked(err)
	}
	return nil
}

func (g *guard) trip(err error) {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.err == nil {
		g.tripLocked(err)
	}
}

func (g *guard) tripLocked(err error) error {
	if g.err == nil {
		g.err = err
		close(g.done)
	}
	return g.err
}

// breach checks the operation's own limits; the caller holds mu.
func (g *guard) breach() error {
	now := g.t.d.Clock.Now()
	if now.After(g.deadline) {
		return ErrTimeout
	}
	if !g.rfSince.IsZero() && g.rfUsed+now.Sub(g.rfSince) > g.limit {
		return ErrCarrierLimit
	}
	if g.armed {
		if got, ok := g.t.radioFrequency(); ok && absFreq(got-g.freq) > g.t.par.rf.offFrequency {
			g.moved = got
			return ErrFrequencyChanged
		}
	}
	return nil
}

// allowCarrier raises the carrier-time cap to limit, for a stage that must sweep the whole travel.
func (g *guard) allowCarrier(limit time.Duration) {
	g.mu.Lock()
	g.limit = max(g.limit, limit)
	g.mu.Unlock()
}

// release unregisters the parent watch; the guard must not be used after.
func (g *guard) release() { g.stop() }

// arm starts watching the radio's frequency: the RF stages begin.
func (g *guard) arm() {
	g.mu.Lock()
	g.armed = true
	g.mu.Unlock()
}

// rfOn notes that the carrier is needed from at on.
func (g *guard) rfOn(at time.Time) {
	g.mu.Lock()
	if g.rfSince.IsZero() {
		g.rfSince = at
	}
	g.mu.Unlock()
}

// rfPause notes that the carrier was dropped at now in the middle of the RF stages: the carrier
// time stops counting until the next rfOn, while the radio's frequency is still watched.
func (g *guard) rfPause(now time.Time) {
	g.mu.Lock()
	defer g.mu.Unlock()
	if !g.rfSince.IsZero() {
		g.rfUsed += now.Sub(g.rfSince)
		g.rfSince = time.Time{}
	}
}

// rfOff ends the RF stages at now and returns the carrier time the operation has used.
func (g *guard) rfOff(now time.Time) time.Duration {
	g.mu.Lock()
	defer g.mu.Unlock()
	if !g.rfSince.IsZero() {
		g.rfUsed += now.Sub(g.rfSince)
		g.rfSince = time.Time{}
	}
	g.armed = false
	return g.rfUsed
}

// rfRunning says whether the carrier is needed now.
func (g *guard) rfRunning() bool {
	g.mu.Lock()
	defer g.mu.Unlock()
	return !g.rfSince.IsZero()
}

// frequencyMoved reports whether the radio was ever found off the tune's frequency during the
// RF stages, and where it was.
func (g *guard) frequencyMoved() (physic.Frequency, bool) {
	g.mu.Lock()
	defer g.mu.Unlock()
	return g.moved, g.moved != 0
}
