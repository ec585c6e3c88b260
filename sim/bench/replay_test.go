package bench

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
)

// The recordings in testdata/sweeps were made with tanksim record; the controller, replayed on
// each with a prediction a few steps off, must land on the recorded dip.
func TestReplayRecordings(t *testing.T) {
	files, _ := filepath.Glob("../../testdata/sweeps/*.sweep")
	if len(files) < 3 {
		t.Fatalf("want at least three recordings in testdata/sweeps, have %d", len(files))
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			fh, err := os.Open(f)
			if err != nil {
				t.Fatal(err)
			}
			defer fh.Close()
			h, samples, err := record.ReadAll(fh)
			if err != nil {
				t.Fatal(err)
			}
			for _, offset := range []float64{-6, 0, 7} {
				r, err := NewReplayRig(h, samples, offset, 3, nil)
				if err != nil {
					t.Fatal(err)
				}
				res := r.Tune(context.Background())
				if res.Outcome != tune.Tuned {
					t.Fatalf("offset %g: %s (%v)", offset, res.Outcome, res.Err)
				}
				if d := res.Pos - r.Best; d < -1 || d > 1 {
					t.Errorf("offset %g: tuned to %d, the recorded dip is at %d", offset, res.Pos, r.Best)
				}
			}
		})
	}
}

func TestRecordSweepShowsTheBacklash(t *testing.T) {
	s := sim.DefaultSpec()
	s.Drive.BacklashSteps = 60
	r, err := NewRig(RigOptions{Truth: s})
	if err != nil {
		t.Fatal(err)
	}
	sw, err := RecordSweep(context.Background(), r, 3750*physic.KiloHertz, 6, 8)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	w, err := record.NewWriter(&buf, sw.Header)
	if err != nil {
		t.Fatal(err)
	}
	for _, smp := range sw.Samples {
		if err := w.Write(smp); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
	_, back, err := record.ReadAll(&buf)
	if err != nil || len(back) != len(sw.Samples) {
		t.Fatalf("round trip: %d samples, %v", len(back), err)
	}
	// Going down, the shaft leads the motor by half the play instead of trailing it: the lowest
	// reading going down is about the whole play below the one going up.
	lowest := func(d motion.Direction) motion.Steps {
		best, swr := motion.Steps(0), 1e9
		for _, smp := range back {
			if smp.Dir == d && smp.SWR < swr {
				best, swr = smp.Step, smp.SWR
			}
		}
		return best
	}
	if d := lowest(motion.Up) - lowest(motion.Down); d < 58 || d > 62 {
		t.Errorf("up and down dips %d steps apart, want the 60-step play", d)
	}
	if u := lowest(motion.Up); u < sw.Best-1 || u > sw.Best+1 {
		t.Errorf("lowest upward reading at %d, the simulator's best is %d", u, sw.Best)
	}
}
