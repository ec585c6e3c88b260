// Package vclock is the simulator's virtual clock.
//
// Time stands still until somebody sleeps: Sleep advances the clock by the requested duration and
// returns at once. A simulated tune therefore costs only the CPU time of its arithmetic, and the
// same seed always gives the same run. The clock is meant to be driven by one goroutine at a time
// (the controller's run loop); it is safe for concurrent use, but concurrent sleepers each advance
// time on their own, which is not a discrete-event schedule.
//
// For the daemon's real-time demo, give the simulator controller/clock.Wall instead.
package vclock

import (
	"context"
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
}

// New returns a clock that reads start.
func New(start time.Time) *Clock { return &Clock{now: start} }

// Now implements clock.Clock.
func (c *Clock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

// Sleep implements clock.Clock: it advances the clock by d and returns at once, unless ctx has
// already ended.
func (c *Clock) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	c.Advance(d)
	return nil
}

// Advance moves the clock forward by d; a negative d is ignored (time never runs backwards).
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
