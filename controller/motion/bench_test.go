package motion

import (
	"context"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

// BenchmarkAxisMove is the CPU cost of one move followed by the axis's poll loop to its end and
// settled, on a drive that asks the profile where it is at every poll (as the simulator's
// does), on the virtual clock: a long move (20,000 steps, some 700 polls) and a short one (40
// steps, a dozen). The speeds are the demo station's (configs/stations/default.toml).
func BenchmarkAxisMove(b *testing.B) {
	for _, bc := range []struct {
		name  string
		steps Steps
	}{{"long", 20000}, {"short", 40}} {
		b.Run(bc.name, func(b *testing.B) {
			ctx := context.Background()
			clk := clock.NewVirtual(epoch)
			a, err := NewAxis(newFakeDrive(clk), clk, Switches{}, Options{Min: -100000, Max: 100000,
				MaxSpeed: 16000, Accel: 100000, Settle: 15 * time.Millisecond, Poll: 2 * time.Millisecond})
			if err != nil {
				b.Fatal(err)
			}
			if err := a.Enable(ctx); err != nil {
				b.Fatal(err)
			}
			a.Reference(0)
			target := bc.steps
			for b.Loop() {
				if err := a.MoveTo(ctx, target, 0); err != nil {
					b.Fatal(err)
				}
				target = -target
			}
		})
	}
}

// BenchmarkProfileStepsAt is the cost of the query a drive makes at every poll.
func BenchmarkProfileStepsAt(b *testing.B) {
	p, err := Plan(20000, 16000, 100000)
	if err != nil {
		b.Fatal(err)
	}
	d := p.Duration()
	var sum int64
	t := time.Duration(0)
	for b.Loop() {
		sum += p.StepsAt(t)
		if t += 2 * time.Millisecond; t > d {
			t = 0
		}
	}
	_ = sum
}
