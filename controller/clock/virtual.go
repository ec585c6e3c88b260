package clock

import (
	"context"
	"sync"
	"time"
)

// Virtual is a clock on which time stands still until somebody sleeps: Sleep advances it by the
// duration asked for and returns at once, so that a ten-second tune costs only the CPU time of
// its arithmetic and a run is the same every time. Advance moves it on without anyone sleeping.
//
// It is meant for one sleeper at a time (the controller's run loop): it is safe for concurrent
// use, but concurrent sleepers each advance time on their own, which is not a discrete-event
// schedule. A test that needs time to pass while nothing runs calls Advance.
type Virtual struct {
	mu  sync.Mutex
	now time.Time
}

// NewVirtual returns a virtual clock that reads start.
func NewVirtual(start time.Time) *Virtual { return &Virtual{now: start} }

// Now implements Clock.
func (c *Virtual) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

// Sleep implements Clock: it advances the clock by d and returns at once, unless ctx has
// already ended, in which case the clock stays where it is and ctx's error is returned. A zero
// or negative d returns at once without moving the clock.
func (c *Virtual) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	c.Advance(d)
	return nil
}

// Advance moves the clock forward by d; a zero or negative d is ignored (time never runs
// backwards).
func (c *Virtual) Advance(d time.Duration) {
	if d <= 0 {
		return
	}
	c.mu.Lock()
	c.now = c.now.Add(d)
	c.mu.Unlock()
}

// Since returns the time elapsed on the clock since t.
func (c *Virtual) Since(t time.Time) time.Duration { return c.Now().Sub(t) }
