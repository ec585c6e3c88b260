package bench

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim/replay"
	"github.com/tankd/tankd/sim/vclock"
)

// ReplayRig is the real controller driven by a recorded sweep instead of a simulated loop:
// the recording answers as the drive and the coupler.
type ReplayRig struct {
	Replay *replay.Replay
	Clock  *vclock.Clock
	Axis   *motion.Axis
	Map    *memmap.Map
	Tuner  *tune.Tuner
	Freq   physic.Frequency
	// Best is where the dip is: the recorder's true best position if it wrote one
	// (true_best_step), else the lowest SWR recorded going up.
	Best motion.Steps
	// Width is the dip's half-width in steps the controller is told to expect.
	Width float64
	// Noise is the recording's reading noise, which every replayed reading carries.
	Noise replay.Noise
}

// NewReplayRig builds the controller on a recording. The memory map is given a prediction
// offset steps away from Best, with a σ of sigma steps, as if it had learned the loop
// imperfectly; the motor starts well below the dip. Every reading carries noise of the size the
// recording's own scatter shows (replay.EstimateNoise), drawn from replayNoiseSeed.
func NewReplayRig(h record.Header, samples []record.Sample, offset, sigma float64, obs tune.Observer) (*ReplayRig, error) {
	freq, best, lo, hi, err := survey(samples)
	if err != nil {
		return nil, err
	}
	if v, ok := h.Meta["true_best_step"]; ok {
		if b, err := strconv.ParseInt(v, 10, 64); err == nil {
			best = b
		}
	}
	f := Hz(freq)
	q := metaFloat(h, "q_loaded", 0)
	slope := metaFloat(h, "slope_steps_per_hz", 0)
	width := 0.0
	if q > 0 && slope != 0 {
		width = math.Abs(slope) * f / (2 * q)
	} else {
		// No model in the metadata: read the half-power half-width off the recording.
		width = halfWidth(samples, freq, best)
		q = 1000
		slope = -2 * q * width / f
	}
	desc := recordedDescription(h)
	backlash := motion.Steps(desc.Drive.BacklashSteps)
	conv := time.Duration(metaFloat(h, "conversion_us", 1000)) * time.Microsecond
	clk := vclock.New(h.Start)
	start := best - motion.Steps(8*width) - 2*backlash
	rp, err := replay.New(clk, samples, replay.Options{Freq: freq, Conversion: 2 * conv, Position: start, HoldEnds: true,
		Name: "recording", Seed: replayNoiseSeed})
	if err != nil {
		return nil, err
	}
	if err := rp.Enable(true); err != nil {
		return nil, err
	}
	nominal := desc.NominalBacklash()
	a, err := controller.Assemble(context.Background(), desc,
		controller.Resources{Clock: clk, Drive: rp, Sensor: rp, Transmitter: carrier{rp}},
		controller.AssembleOptions{
			Tune: tune.Options{Transmit: true}, Observer: obs,
			// The recording's positions are the recorder's own count, not this description's
			// travel: the soft limits are the recording's span, with room for a run-up past the
			// play either side; the map is told where the dip is, give or take.
			AdjustAxis: func(ao *motion.Options) {
				ao.Min, ao.Max = min(lo, start)-nominal-replayLimitMargin, hi+nominal+replayLimitMargin
			},
			AdjustMap: func(mo *memmap.Options) {
				*mo = memmap.Options{Prior: fixedPrior{f0: f, pos: float64(best) + offset, sigma: sigma, slope: slope, q: q}}
			},
		})
	if err != nil {
		return nil, err
	}
	ax, mm, tn := a.Axis, a.Map, a.Tuner
	ax.Reference(start)
	return &ReplayRig{Replay: rp, Clock: clk, Axis: ax, Map: mm, Tuner: tn, Freq: freq, Best: best, Width: width, Noise: rp.Noise()}, nil
}

// replayNoiseSeed seeds the replayed readings' noise: a fixed seed, so that a replay, like the
// benchmark, gives the same run every time.
const replayNoiseSeed = 1

// Tune runs the controller's tune on the recording.
func (r *ReplayRig) Tune(ctx context.Context) tune.Result {
	return r.Tuner.Tune(ctx, tune.Request{Freq: r.Freq, RF: true})
}

// replayLimitMargin is how far beyond the recording's span, and the nominal play beyond it, the
// replay's soft limits lie, in steps: enough for a fine sweep that starts at an end of the
// recording to run up past the play, and no further, since the recording answers nothing there.
const replayLimitMargin = 50

// defaultRecordedBacklash is the play assumed for a recording that does not say its own, steps:
// about the demo station's (40) with some to spare.
const defaultRecordedBacklash = 50

// recordedDescription is the station a recording was made on, as far as its metadata says: the
// demo station's description with the recording's gear play. A recording keeps no more of its
// station; the replay's soft limits come from the recording itself (NewReplayRig).
func recordedDescription(h record.Header) station.Description {
	d := station.DefaultDescription()
	d.Drive.BacklashSteps = metaFloat(h, "backlash_steps", defaultRecordedBacklash)
	return d
}

func metaFloat(h record.Header, key string, def float64) float64 {
	if v, ok := h.Meta[key]; ok {
		if x, err := strconv.ParseFloat(v, 64); err == nil {
			return x
		}
	}
	return def
}

// survey finds a recording's frequency, its lowest upward SWR and its span.
func survey(samples []record.Sample) (freq physic.Frequency, best, lo, hi motion.Steps, err error) {
	count := map[physic.Frequency]int{}
	for _, s := range samples {
		count[s.Freq]++
	}
	for f, n := range count {
		if n > count[freq] || n == count[freq] && f < freq {
			freq = f
		}
	}
	bestSWR := math.Inf(1)
	lo, hi = math.MaxInt64, math.MinInt64
	for _, s := range samples {
		if s.Freq != freq {
			continue
		}
		lo, hi = min(lo, s.Step), max(hi, s.Step)
		if s.Dir == motion.Up && s.SWR < bestSWR {
			best, bestSWR = s.Step, s.SWR
		}
	}
	if math.IsInf(bestSWR, 1) {
		return 0, 0, 0, 0, fmt.Errorf("replay: the recording has no upward samples")
	}
	return freq, best, lo, hi, nil
}

// halfWidth estimates the dip's half-power half-width: the distance from the lowest point to
// where the absorbed share 1−|Γ|² has fallen to half its peak, going up.
func halfWidth(samples []record.Sample, freq physic.Frequency, best motion.Steps) float64 {
	peak, far := 0.0, math.Inf(1)
	for _, s := range samples {
		if s.Freq == freq && s.Dir == motion.Up && s.Forward > 0 {
			a := 1 - float64(s.Reflected)/float64(s.Forward)
			peak = math.Max(peak, a)
		}
	}
	for _, s := range samples {
		if s.Freq == freq && s.Dir == motion.Up && s.Step > best && s.Forward > 0 {
			if a := 1 - float64(s.Reflected)/float64(s.Forward); a < peak/2 {
				far = math.Min(far, float64(s.Step-best))
			}
		}
	}
	if math.IsInf(far, 1) {
		return 10
	}
	return math.Max(far, 1)
}

// fixedPrior predicts a straight line through one position.
type fixedPrior struct{ f0, pos, sigma, slope, q float64 }

func (p fixedPrior) Predict(f physic.Frequency) (memmap.Prediction, bool) {
	return memmap.Prediction{Pos: p.pos + p.slope*(Hz(f)-p.f0), Sigma: p.sigma, Slope: p.slope, Q: p.q, Source: memmap.SourcePrior}, true
}

// carrier keys the recording's carrier.
type carrier struct{ r *replay.Replay }

func (c carrier) Key(context.Context, physic.Power) error { c.r.Carrier(true); return nil }
func (c carrier) Unkey(context.Context) error             { c.r.Carrier(false); return nil }
