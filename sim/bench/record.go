package bench

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
)

// Sweep is a recorded sweep through the dip and what the simulator knows about it.
type Sweep struct {
	Header  record.Header
	Samples []record.Sample
	Best    motion.Steps // the true best position, final-approach (upward) side
}

// RecordSweep sweeps the rig's loop through the dip at f, upward then downward, reading the
// coupler on the move, and returns the recording. span is how far either side of the dip to go,
// in half-widths of the dip (0: 6); perWidth is how many readings fall in one half-width (0: 8).
func RecordSweep(ctx context.Context, r *Rig, f physic.Frequency, span, perWidth float64) (Sweep, error) {
	if span == 0 {
		span = 6
	}
	if perWidth == 0 {
		perWidth = 8
	}
	st, ax := r.Station, r.Axis
	if err := st.Radio.SetFrequency(f); err != nil {
		return Sweep{}, err
	}
	best, _, err := st.Best(Hz(f))
	if err != nil {
		return Sweep{}, err
	}
	best += ax.Position() - st.Mech.MotorPosition()
	prior, err := r.Described.Prior(st.Temperature())
	if err != nil {
		return Sweep{}, err
	}
	pr, ok := prior.Predict(f)
	if !ok {
		return Sweep{}, fmt.Errorf("record: the capacitor cannot tune %v", f)
	}
	w := math.Abs(pr.Slope) * Hz(f) / (2 * pr.Q)
	half := motion.Steps(math.Ceil(span*w)) + 2
	lo, hi := best-half, best+half
	run := motion.Steps(st.Spec.Drive.BacklashSteps) + 20
	if err := ax.Approach(ctx, lo); err != nil {
		return Sweep{}, err
	}
	if err := st.Radio.Key(ctx, 5*physic.Watt); err != nil {
		return Sweep{}, err
	}
	defer func() { _ = st.Radio.Unkey(context.WithoutCancel(ctx)) }()
	conv := 2 * st.Spec.Conversion()
	if st.Spec.Simulator.Coupler.Simultaneous {
		conv /= 2
	}
	speed := w / perWidth / conv.Seconds()
	start := r.Time.Now()
	var samples []record.Sample
	sweep := func(to motion.Steps, dir motion.Direction, from motion.Steps) error {
		if err := ax.Start(to, speed); err != nil {
			return err
		}
		for {
			rd, err := st.Sensor().Read(ctx)
			if err != nil {
				return err
			}
			pos := motion.Steps(ax.PositionAt(rd.At))
			_, moving, err := ax.Poll()
			if err != nil {
				return err
			}
			if (pos-from)*motion.Steps(dir) >= 0 { // the play is taken up
				samples = append(samples, record.Sample{T: rd.At.Sub(start), Step: pos, Dir: dir, Freq: f,
					Forward: rd.Forward, Reflected: rd.Reflected, SWR: rd.SWR()})
			}
			if !moving {
				return ax.Wait(ctx)
			}
		}
	}
	if err := sweep(hi, motion.Up, lo); err != nil {
		return Sweep{}, err
	}
	if err := ax.MoveTo(ctx, hi+run, 0); err != nil {
		return Sweep{}, err
	}
	if err := sweep(lo-run, motion.Down, hi); err != nil {
		return Sweep{}, err
	}
	h := record.Header{Version: record.Version, Start: start.Truncate(time.Second), Meta: map[string]string{
		"source":             "tanksim",
		"loop":               st.Spec.Name,
		"seed":               strconv.FormatUint(st.Spec.Simulator.Seed, 10),
		"true_best_step":     strconv.FormatInt(best, 10),
		"backlash_steps":     strconv.FormatFloat(st.Spec.Drive.BacklashSteps, 'f', -1, 64),
		"slope_steps_per_hz": strconv.FormatFloat(pr.Slope, 'g', 6, 64),
		"q_loaded":           strconv.FormatFloat(pr.Q, 'f', 0, 64),
		"conversion_us":      strconv.FormatFloat(float64(conv/2)/float64(time.Microsecond), 'f', 0, 64),
	}}
	// times count from the header's start, which is a whole second
	shift := start.Sub(h.Start)
	for i := range samples {
		samples[i].T += shift
	}
	return Sweep{Header: h, Samples: samples, Best: best}, nil
}
