// Package clock is the time source the controller runs on.
//
// Every wait in the controller (motor ramps, settling, ADC conversions, timeouts) goes through a
// Clock, so that the same code runs in real time on the loop (Wall) and on a virtual clock
// (Virtual) in tests and benchmarks, where a ten-second tune takes microseconds.
//
// What the caller must do: give every component of one installation the same Clock; on a
// Virtual clock, let only one goroutine sleep at a time (each sleeper moves time on by itself),
// and move time on by hand with Advance where a test needs time to pass while nothing sleeps.
package clock

import (
	"context"
	"time"
)

// Clock tells the time and waits.
type Clock interface {
	// Now returns the current time on this clock.
	Now() time.Time
	// Sleep waits until d has passed on this clock, or until ctx ends, whichever comes first. It
	// returns ctx's error in the second case. A zero or negative d returns at once (but still
	// reports a context that has already ended).
	Sleep(ctx context.Context, d time.Duration) error
}

// Wall is the real-time clock.
type Wall struct{}

// Now implements Clock.
func (Wall) Now() time.Time { return time.Now() }

// Sleep implements Clock.
func (Wall) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if d <= 0 {
		return nil
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
