package bench

import (
	"context"
	"maps"
	"slices"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/tune"
)

// tuneJudged tunes the rig's loop to f with a carrier and judges where it ended: the result,
// the true SWR there, and the best SWR the loop can reach now.
func tuneJudged(t *testing.T, r *Rig, f physic.Frequency) (res tune.Result, got, best float64) {
	t.Helper()
	res, err := r.Tune(context.Background(), f, true)
	if err != nil {
		t.Fatal(err)
	}
	_, best, err = r.Station.Best(Hz(f))
	if err != nil {
		t.Fatal(err)
	}
	return res, r.Station.TrueSWR(Hz(f)), best
}

// harshScenarios are the first n scenarios a bench run of the harsh ranges draws with this seed
// and map, as Run draws them (the stations in name order).
func harshScenarios(t *testing.T, n int, seed uint64, m MapState) []Scenario {
	t.Helper()
	knobs, stations, err := RangesNamed(HarshRanges)
	if err != nil {
		t.Fatal(err)
	}
	names := slices.Sorted(maps.Keys(stations))
	scs, err := Generate(stations, names, n, seed, m, knobs)
	if err != nil {
		t.Fatal(err)
	}
	return scs
}
