package bench

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/controller/tune"
)

// Strategy names.
const (
	Tankd      = "tankd"      // the real controller
	Exhaustive = "exhaustive" // fixed-step sweep of the whole travel, pick the minimum
	Oracle     = "oracle"     // knows the best position, moves there, reads once
)

// Strategies in report order.
var Strategies = []string{Tankd, Exhaustive, Oracle}

// attempt is what one strategy did on one scenario.
type attempt struct {
	tuneTime, rfTime time.Duration
	prepositioned    bool
	preSWR           float64 // true SWR after the RF-free pre-position
	outcome          string
}

// runTankd runs the controller's own tune.
func runTankd(ctx context.Context, r *Rig, sc Scenario, pre *float64) (attempt, error) {
	res, err := r.Tune(ctx, sc.Freq, true)
	if err != nil {
		return attempt{}, err
	}
	a := attempt{tuneTime: res.Duration(), rfTime: res.RFTime, outcome: string(res.Outcome),
		prepositioned: res.Prepositioned, preSWR: *pre}
	return a, nil
}

// exhaustiveStartMargin is how far above the soft limit plus the described play the exhaustive
// sweep starts: room for its run-up (a simple tuner's fixed allowance).
const exhaustiveStartMargin = 120

// refPower is the tune carrier the references key.
const refPower = refReadPower * physic.Watt

// carrierSeen is the forward power a reference takes for its carrier being up: half of it (a
// reading that sees the carrier at all sees most of it; the detectors' floor reads microwatts).
const carrierSeen = refPower / 2

// maxKeyUpReads bounds a reference's wait for its carrier, in readings: some seconds of them,
// when a radio keys up in tens of milliseconds (from memory).
const maxKeyUpReads = 1000

// errNoCarrier: a reference keyed the radio and never saw its carrier.
var errNoCarrier = errors.New("reference: no carrier after keying")

// readOnCarrier is a reference's first reading after keying: read again until the carrier is
// up, as a simple tuner checks its forward power.
func readOnCarrier(ctx context.Context, r *Rig) (sense.Reading, error) {
	for range maxKeyUpReads {
		rd, err := r.sensor.Read(ctx)
		if err != nil || rd.Forward >= carrierSeen {
			return rd, err
		}
	}
	return sense.Reading{}, errNoCarrier
}

// exhaustiveStep is the exhaustive sweep's step at f: half the SWR ≤ 1.5 window the
// description's physics predicts.
func exhaustiveStep(desc station.Description, f physic.Frequency) (motion.Steps, error) {
	prior, err := desc.Prior(desc.Site.MeanC)
	if err != nil {
		return 0, err
	}
	pr, ok := prior.Predict(f)
	if !ok {
		return 0, fmt.Errorf("exhaustive: no model at %v", f)
	}
	// BW(S) = f·(S−1)/(Q_u·√S) (Yaghjian & Best 2005) with Q_u = 2·Q_L, in steps.
	window := math.Abs(pr.Slope) * Hz(f) * 0.5 / (2 * pr.Q * math.Sqrt(1.5))
	return motion.Steps(max(1, math.Floor(window/2))), nil
}

// runExhaustive is what a simple fixed-step tuner does: a sweep of the whole travel at half the
// SWR ≤ 1.5 window, one reading a step after the motor settles, then a backlash-correct move to
// the lowest reading. It steps the motion loop and the simulator through every move and
// reading: exhaustiveFromTruth computes the same from the truth, far faster; this one stays to
// check it. Its phases are counted as a tune's, its final approach as the approaching state.
func runExhaustive(ctx context.Context, r *Rig, sc Scenario) (attempt, error) {
	clk := r.Time
	start := clk.Now()
	r.timeline.begin()
	step, err := exhaustiveStep(r.Described, sc.Freq)
	if err != nil {
		return attempt{}, err
	}
	ax := r.Axis
	if !ax.Trusted() {
		// A simple tuner has no notion of a lost position: it trusts its own count of steps,
		// whatever the controller concluded in the history before it.
		r.Reference(ax.Position())
	}
	lo, hi := ax.SoftLimits()
	lo += motion.Steps(r.Described.Drive.BacklashSteps) + exhaustiveStartMargin
	if err := r.Station.Radio.SetFrequency(sc.Freq); err != nil {
		return attempt{}, err
	}
	if err := ax.Approach(ctx, lo); err != nil {
		return attempt{}, err
	}
	if err := r.Station.Radio.Key(ctx, refPower); err != nil {
		return attempt{}, err
	}
	rfStart := clk.Now()
	best, bestG := lo, math.Inf(1)
	for p := lo; p <= hi; p += step {
		if err := ax.MoveTo(ctx, p, 0); err != nil {
			return attempt{}, err
		}
		read := r.sensor.Read
		if p == lo {
			read = func(ctx context.Context) (sense.Reading, error) { return readOnCarrier(ctx, r) }
		}
		rd, err := read(ctx)
		if err != nil {
			return attempt{}, err
		}
		if g := rd.Gamma2(); g < bestG {
			best, bestG = p, g
		}
	}
	rf := clk.Now().Sub(rfStart)
	if err := r.Station.Radio.Unkey(ctx); err != nil {
		return attempt{}, err
	}
	r.timeline.stateChanged(tune.Approaching)
	if err := ax.Approach(ctx, best); err != nil {
		return attempt{}, err
	}
	r.timeline.end()
	return attempt{tuneTime: clk.Now().Sub(start), rfTime: rf, outcome: "swept"}, nil
}

// runOracle is the lower bound: it knows where the best position is, approaches it with the
// true play taken up, and reads once. It steps the motion loop; oracleFromTruth computes the
// same from the truth. Its phases: the approach, and the reading as the verify.
func runOracle(ctx context.Context, r *Rig, sc Scenario) (attempt, error) {
	clk := r.Time
	start := clk.Now()
	r.timeline.begin()
	r.timeline.stateChanged(tune.Approaching)
	st := r.Station
	if err := st.Radio.SetFrequency(sc.Freq); err != nil {
		return attempt{}, err
	}
	best, _, err := st.Best(Hz(sc.Freq))
	if err != nil {
		return attempt{}, err
	}
	ax := r.Axis
	ax.UseBacklash(motion.Steps(math.Ceil(st.Spec.Drive.BacklashSteps)))
	// The oracle sees the shaft: if the motor loses pulses on the way, it goes again. Each try
	// goes a fraction of the distance left, so a few are enough even for a motor that loses
	// pulses at the planned speed.
	lo, hi := ax.SoftLimits()
	for range 6 {
		offset := ax.Position() - st.Mech.MotorPosition()
		if t := best + offset; t < lo || t > hi || !ax.Trusted() {
			// Steps lost by the thousand put the target outside the soft limits in the axis's
			// frame, or the controller has given up its position: back to the motor's true
			// frame, where the best position lies inside them.
			r.Reference(st.Mech.MotorPosition())
			offset = 0
		}
		if err := ax.Approach(ctx, best+offset); err != nil {
			return attempt{}, err
		}
		if st.Mech.MotorPosition() == best {
			break
		}
	}
	if err := st.Radio.Key(ctx, refPower); err != nil {
		return attempt{}, err
	}
	r.timeline.stateChanged(tune.Verifying)
	rfStart := clk.Now()
	if _, err := readOnCarrier(ctx, r); err != nil {
		return attempt{}, err
	}
	rf := clk.Now().Sub(rfStart)
	if err := st.Radio.Unkey(ctx); err != nil {
		return attempt{}, err
	}
	r.timeline.end()
	return attempt{tuneTime: clk.Now().Sub(start), rfTime: rf, outcome: "placed"}, nil
}
