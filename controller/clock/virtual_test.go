package clock_test

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

var (
	_ clock.Clock = (*clock.Virtual)(nil)
	_ clock.Clock = clock.Wall{}
)

var start = time.Date(2026, time.January, 1, 0, 0, 0, 0, time.UTC)

func TestVirtualSleepAdvances(t *testing.T) {
	c := clock.NewVirtual(start)
	ctx := context.Background()
	if err := c.Sleep(ctx, 1500*time.Millisecond); err != nil {
		t.Fatal(err)
	}
	c.Advance(-time.Hour) // ignored: time never runs backwards
	if err := c.Sleep(ctx, -time.Second); err != nil {
		t.Fatal(err)
	}
	if err := c.Sleep(ctx, 0); err != nil {
		t.Fatal(err)
	}
	c.Advance(250 * time.Millisecond)
	// 1.5 s slept and 0.25 s advanced: the sum, exactly.
	if got := c.Since(start); got != 1750*time.Millisecond {
		t.Fatalf("elapsed %v, want 1.75 s", got)
	}
}

func TestVirtualSleepHonoursEndedContext(t *testing.T) {
	c := clock.NewVirtual(start)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := c.Sleep(ctx, time.Second); !errors.Is(err, context.Canceled) {
		t.Fatalf("Sleep after cancel = %v, want context.Canceled", err)
	}
	if !c.Now().Equal(start) {
		t.Fatalf("a cancelled sleep moved the clock to %v", c.Now())
	}
}

// Concurrent sleepers each advance the clock by their own sleep: the total is the sum, whatever
// the interleaving (the clock is safe for concurrent use, not a schedule).
func TestVirtualConcurrentSleepsAddUp(t *testing.T) {
	c := clock.NewVirtual(start)
	var wg sync.WaitGroup
	for range 8 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for range 100 {
				_ = c.Sleep(context.Background(), time.Millisecond)
			}
		}()
	}
	wg.Wait()
	// 8 sleepers × 100 sleeps × 1 ms.
	if got := c.Since(start); got != 800*time.Millisecond {
		t.Fatalf("elapsed %v, want 800 ms", got)
	}
}

func TestWallSleepHonoursContext(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := (clock.Wall{}).Sleep(ctx, time.Hour); !errors.Is(err, context.Canceled) {
		t.Fatalf("Wall.Sleep after cancel = %v, want context.Canceled", err)
	}
	if err := (clock.Wall{}).Sleep(context.Background(), 0); err != nil {
		t.Fatalf("Wall.Sleep(0) = %v", err)
	}
}
