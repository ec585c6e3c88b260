// Package vclock is the simulator's virtual clock: controller/clock's Virtual clock, on which
// time stands still until somebody sleeps, with the simulator's fixed Epoch and, as a test mode,
// late wake-ups.
//
// A clock made by NewJittered wakes its sleepers late now and then, as a loaded computer's
// scheduler does (see Lateness): a test mode for code that must not depend on waking on time.
// A clock made by New is exactly a clock.Virtual.
//
// What the caller must do: drive a clock from one goroutine at a time, as clock.Virtual says;
// for the daemon's real-time demo, give the simulator controller/clock.Wall instead.
package vclock

import (
	"context"
	"fmt"
	"sync"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

// Epoch is where a new Clock starts unless told otherwise: a fixed instant, so that runs and
// recordings are reproducible.
var Epoch = time.Date(2026, time.January, 1, 0, 0, 0, 0, time.UTC)

// Clock is a virtual clock (a clock.Virtual) whose sleeps may wake late. The zero value is not
// usable; call New or NewJittered.
type Clock struct {
	*clock.Virtual
	mu sync.Mutex // guards late's random stream
	// late draws the wake-up lateness; nil for an exact clock, whose Sleep must stay as cheap as
	// it is: it is the benchmark's hot path.
	late *drawer
}

// New returns an exact clock that reads start.
func New(start time.Time) *Clock { return &Clock{Virtual: clock.NewVirtual(start)} }

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

// Sleep implements clock.Clock: it advances the clock by d and returns at once, unless ctx has
// already ended. On a jittered clock a sleep of d > 0 may advance it further, by the lateness
// drawn for this wake-up; like time.Sleep, a sleep of d <= 0 returns at once and is never late.
// Advance (clock.Virtual's) is never late: it is how a test skips time on purpose, not
// somebody waiting.
func (c *Clock) Sleep(ctx context.Context, d time.Duration) error {
	if c.late == nil || d <= 0 {
		return c.Virtual.Sleep(ctx, d)
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	c.mu.Lock()
	late := c.late.next()
	c.mu.Unlock()
	c.Advance(d + late)
	return nil
}
