package memmap

import (
	"errors"
	"fmt"
	"math"
	"slices"

	"periph.io/x/conn/v3/physic"
)

// Observation is one tune of a history to replay: where the dip truly was, and what the tune
// learned of it.
type Observation struct {
	// Point is the tune: its frequency, time and temperature are where and when the map is asked
	// to predict; its position is what the tune found and the map learns (if Learn).
	Point
	// True is where the dip really was, in steps: what the prediction is scored against. A tune
	// finds it only to within its own error, which is why Point.Pos may differ.
	True float64
	// Learn says whether the map learns Point after predicting it (a tune that failed, or whose
	// dip was held back, teaches nothing).
	Learn bool
}

// Score is a prediction made during a replay, before the tune it was for.
type Score struct {
	Freq physic.Frequency
	Prediction
	// Err is the true position less the predicted one, in steps; Z is Err/Sigma.
	Err, Z float64
	// Points is how many points the map had learned when it predicted.
	Points int
}

// Replay feeds a history of tunes, in time order, through a new map with opts: before each
// tune the map predicts, the prediction is scored against the true position, and then the
// map learns the tune's point if the observation says so. It returns a score for every tune the
// map could predict. It is how the map's σ is checked against the truth without a tuner (a
// simulator, or a recording of tunes whose dips were found to the step): where the options
// describe the loop, |Z| falls within 1, 2 and 3 about 68 %, 95 % and 99.7 % of the time; where
// they are generous, within 2 and 3 more often, by less the longer the history.
func Replay(opts Options, history []Observation) ([]Score, error) {
	m, err := New(opts)
	if err != nil {
		return nil, err
	}
	out := make([]Score, 0, len(history))
	for i, ob := range history {
		if !finite(ob.True) {
			return nil, fmt.Errorf("memmap: replay: tune %d at %v: true position %g is not finite", i, ob.Freq, ob.True)
		}
		var temp *physic.Temperature
		if ob.HasTemp {
			temp = &ob.Temp
		}
		if p, ok := m.Predict(ob.Freq, ob.At, temp); ok {
			e := ob.True - p.Pos
			out = append(out, Score{Freq: ob.Freq, Prediction: p, Err: e, Z: e / p.Sigma, Points: m.Len()})
		}
		if !ob.Learn {
			continue
		}
		if err := m.Learn(ob.Point); err != nil && !errors.Is(err, ErrSuperseded) {
			return out, fmt.Errorf("memmap: replay: tune %d: %w", i, err)
		}
	}
	return out, nil
}

// Coverage summarises scores: the share of them within 1, 2 and 3 σ, and the median |Z|
// (0.674 for a normal error, from standard normal tables).
type Coverage struct {
	N                int
	Within           [3]float64 // within 1σ, 2σ, 3σ
	MedianAbsZ, MaxZ float64
}

// Summarise returns the coverage of scores.
func Summarise(scores []Score) Coverage {
	c := Coverage{N: len(scores)}
	if c.N == 0 {
		return c
	}
	az := make([]float64, len(scores))
	for i, s := range scores {
		az[i] = math.Abs(s.Z)
		for k := range c.Within {
			if az[i] <= float64(k+1) {
				c.Within[k]++
			}
		}
	}
	for k := range c.Within {
		c.Within[k] /= float64(c.N)
	}
	slices.Sort(az)
	c.MaxZ = az[len(az)-1]
	if n := len(az); n%2 == 1 {
		c.MedianAbsZ = az[n/2]
	} else {
		c.MedianAbsZ = (az[n/2-1] + az[n/2]) / 2
	}
	return c
}

// String formats the coverage for a log line.
func (c Coverage) String() string {
	return fmt.Sprintf("%d predictions: %.3f within 1σ, %.3f within 2σ, %.3f within 3σ; median |z| %.3f, largest %.2f",
		c.N, c.Within[0], c.Within[1], c.Within[2], c.MedianAbsZ, c.MaxZ)
}
