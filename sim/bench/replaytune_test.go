package bench

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/tune"
)

// Replayed, a recording is as noisy as it was recorded: the readings the controller takes at
// rest to measure the noise scatter by the recording's own noise, √(σ_f² + σ_r²) in ln |Γ|²
// (the two channels' noise apart, replay.EstimateNoise), not by none.
func TestReplayedReadingsAreAsNoisyAsTheRecording(t *testing.T) {
	files, _ := filepath.Glob("../../testdata/sweeps/*.sweep")
	if len(files) < 4 {
		t.Fatalf("want the four recordings of testdata/sweeps, have %d", len(files))
	}
	for _, f := range files {
		fh, err := os.Open(f)
		if err != nil {
			t.Fatal(err)
		}
		h, samples, err := record.ReadAll(fh)
		fh.Close()
		if err != nil {
			t.Fatal(err)
		}
		var sum float64
		df := 0
		var want float64
		for _, offset := range []float64{-6, 0, 7} {
			var g []float64
			obs := tune.ObserverFunc(func(e tune.Event) {
				if e.Kind == tune.KindReading && e.Stage == "noise" && e.Gamma2 > 0 {
					g = append(g, math.Log(e.Gamma2))
				}
			})
			r, err := NewReplayRig(h, samples, offset, 3, obs)
			if err != nil {
				t.Fatal(err)
			}
			want = math.Hypot(r.Noise.Forward, r.Noise.Reflected)
			if res := r.Tune(context.Background()); res.Outcome != tune.Tuned {
				t.Fatalf("%s, offset %g: %s (%v)", filepath.Base(f), offset, res.Outcome, res.Err)
			}
			m := 0.0
			for _, x := range g {
				m += x
			}
			m /= float64(len(g))
			for _, x := range g {
				sum += (x - m) * (x - m)
			}
			df += len(g) - 1
		}
		if df < 10 {
			t.Fatalf("%s: %d noise readings' worth, too few to judge", filepath.Base(f), df)
		}
		// Some twenty degrees of freedom measure σ to about 15 %; 0.6 to 1.5 of the estimate is
		// three of those either way.
		got := math.Sqrt(sum / float64(df))
		if got < 0.6*want || got > 1.5*want {
			t.Errorf("%s: readings at rest scatter by %.5f of ln |Γ|², the recording's noise is %.5f", filepath.Base(f), got, want)
		}
		t.Logf("%s: at rest %.5f of ln |Γ|² (%d degrees of freedom), recorded %.5f", filepath.Base(f), got, df, want)
	}
}
