package bench

import (
	"context"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
)

func TestColdTuneOnDefaultStation(t *testing.T) {
	var events []tune.Event
	r, err := NewRig(RigOptions{Truth: sim.DefaultSpec(), Observer: tune.ObserverFunc(func(e tune.Event) {
		if e.Kind != tune.KindReading {
			events = append(events, e)
		}
	})})
	if err != nil {
		t.Fatal(err)
	}
	// 160 m and 80 m: the demo's two turns resonate by themselves below 40 m.
	for _, f := range []physic.Frequency{3750 * physic.KiloHertz, 1850 * physic.KiloHertz, 3700 * physic.KiloHertz, 1990 * physic.KiloHertz} {
		res, err := r.Tune(context.Background(), f, true)
		if err != nil {
			t.Fatal(err)
		}
		best, bestSWR, _ := r.Station.Best(Hz(f))
		got := r.Station.TrueSWR(Hz(f))
		t.Logf("%v: %s in %v (rf %v), pos %d best %d, SWR %.3f true %.3f best %.3f, readings %d, widened %d, fit %+v",
			f, res.Outcome, res.Duration(), res.RFTime, res.Pos, best, res.SWR, got, bestSWR, res.Readings, res.Widened, res.Fit)
		if res.Outcome != tune.Tuned || got > bestSWR+0.1 {
			for _, e := range events {
				t.Logf("%s %s %s %.1f %s", e.Kind, e.State, e.Stage, e.Pos, e.Text)
			}
			t.Fatalf("outcome %s (%v): SWR %.3f, best %.3f", res.Outcome, res.Err, got, bestSWR)
		}
		events = nil
	}
}
