package bench

import (
	"context"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
)

// BenchmarkTuneCold is the CPU cost of one whole tune from the physics prior (coarse scan, fine
// sweep, fit, approach, verify), simulator included, on the virtual clock.
func BenchmarkTuneCold(b *testing.B) {
	ctx := context.Background()
	for b.Loop() {
		b.StopTimer()
		r, err := NewRig(RigOptions{Truth: sim.DefaultSpec()})
		if err != nil {
			b.Fatal(err)
		}
		b.StartTimer()
		if res, _ := r.Tune(ctx, 3750*physic.KiloHertz, true); res.Outcome != tune.Tuned {
			b.Fatal(res.Outcome, res.Err)
		}
	}
}

// BenchmarkTuneWarm is the CPU cost of a tune from a learned map (pre-position, fine sweep,
// fit, approach, verify).
func BenchmarkTuneWarm(b *testing.B) {
	ctx := context.Background()
	r, err := NewRig(RigOptions{Truth: sim.DefaultSpec()})
	if err != nil {
		b.Fatal(err)
	}
	for _, f := range []physic.Frequency{3750 * physic.KiloHertz, 3600 * physic.KiloHertz, 3900 * physic.KiloHertz} {
		r.Tune(ctx, f, true)
	}
	fs := []physic.Frequency{3700 * physic.KiloHertz, 3800 * physic.KiloHertz}
	i := 0
	for b.Loop() {
		if res, _ := r.Tune(ctx, fs[i%2], true); res.Outcome != tune.Tuned {
			b.Fatal(res.Outcome, res.Err)
		}
		i++
	}
}
