// Package vclock is the simulator's virtual clock.
//
// Time stands still until somebody sleeps: Sleep advances the clock by the requested duration and
// returns at once. A simulated tune therefore costs only the CPU time of its arithmetic, and the
// same seed always gives the same run. The clock is meant to be driven by one goroutine at a time
// (the controller's run loop); it is safe for concurrent use, but concurrent sleepers each advance
// time on their own, which is not a discrete-event schedule.
//
// A clock made by NewJittered also wakes its sleepers late now and then, as a loaded computer's
// scheduler does (see Lateness): a test mode for code that must not depend on waking on time.
//
// For the daemon's real-time demo, give the simulator controller/clock.Wall instead.
package vclock

import (
	"context"
	"fmt"
	"sync"
	"time"
)

// Epoch is where a new Clock starts unless told otherwise: a fixed instant, so that runs and
// recordings are reproducible.
var Epoch = time.Date(2026, time.January, 1, 0, 0, 0, 0, time.UTC)

// Clock is a virtual clock. The zero value is not usable; call New.
type Clock struct {
	mu  sync.Mutex
	now time.Time
	// late draws the wake-up lateness; nil for an exact clock, whose Sleep must stay as cheap as
	// it is: it is the benchmark's hot path.
	late *drawer
}

// New returns a clock that reads start.
func New(start time.Time) *Clock { return &Clock{now: start} }

// NewJittered returns a clock that reads start and whose sleeps wake late as l says. A zero l
// gives the same clock as New.
func NewJittered(start time.Time, l Lateness) (*Clock, error) {
	if err := l.Validate(); err != nil {
		return nil, fmt.Errorf("new jittered clock: %w", err)
	}
	c := New(start)
	if l.P > 0 {
		c.late = newDrawer(l, streamSleep)
	}
	return c, nil
}

// Now implements clock.Clock.
func (c *Clock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

// Sleep implements clock.Clock: it advances the clock by d and returns at once, unless ctx has
// already ended. On a jittered clock a sleep of d > 0 may advance it further, by the lateness
// drawn for this wake-up; like time.Sleep, a sleep of d <= 0 returns at once and is never late.
func (c *Clock) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if c.late == nil || d <= 0 {
		c.Advance(d)
		return nil
	}
	c.mu.Lock()
	c.now = c.now.Add(d + c.late.next())
	c.mu.Unlock()
	return nil
}

// Advance moves the clock forward by d; a negative d is ignored (time never runs backwards). It
// is never late: it is how a test skips time on purpose, not somebody waiting.
func (c *Clock) Advance(d time.Duration) {
	if d <= 0 {
		return
	}
	c.mu.Lock()
	c.now = c.now.Add(d)
	c.mu.Unlock()
}

// Since returns the virtual time elapsed since t.
func (c *Clock) Since(t time.Time) time.Duration { return c.Now().Sub(t) }
