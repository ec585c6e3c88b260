package vclock

import (
	"context"
	"errors"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

var _ clock.Clock = (*Clock)(nil)

func TestSleepAdvances(t *testing.T) {
	c := New(Epoch)
	ctx := context.Background()
	if err := c.Sleep(ctx, 1500*time.Millisecond); err != nil {
		t.Fatal(err)
	}
	c.Advance(-time.Hour) // ignored
	if err := c.Sleep(ctx, 0); err != nil {
		t.Fatal(err)
	}
	if got := c.Since(Epoch); got != 1500*time.Millisecond {
		t.Fatalf("elapsed %v, want 1.5s", got)
	}
}

func TestSleepHonoursEndedContext(t *testing.T) {
	c := New(Epoch)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := c.Sleep(ctx, time.Second); !errors.Is(err, context.Canceled) {
		t.Fatalf("Sleep after cancel = %v, want context.Canceled", err)
	}
	if !c.Now().Equal(Epoch) {
		t.Fatalf("a cancelled sleep moved the clock to %v", c.Now())
	}
}
