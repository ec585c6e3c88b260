package vclock

import (
	"context"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

var _ clock.Clock = (*Clock)(nil)

// A clock made by New is the plain virtual clock: its sleeps are exact (clock.Virtual's own
// tests cover the rest of its behaviour).
func TestNewIsExact(t *testing.T) {
	c := New(Epoch)
	for range 1000 {
		if err := c.Sleep(context.Background(), time.Millisecond); err != nil {
			t.Fatal(err)
		}
	}
	if got := c.Since(Epoch); got != time.Second {
		t.Fatalf("a thousand sleeps of 1 ms took %v", got)
	}
}
