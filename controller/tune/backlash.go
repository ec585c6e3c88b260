package tune

import (
	"errors"
	"fmt"
	"math"

	"github.com/tankd/tankd/controller/motion"
)

// errInconsistentPlay: the up and down sweeps do not give a play the gear can have.
var errInconsistentPlay = errors.New("no consistent play")

// play is one backlash measurement.
type play struct {
	b        motion.Steps
	up, down float64 // mean fitted centres
	spread   float64 // the worse spread of the up or the down centres
	sigma    float64 // the standard error of up − down
}

// measurePlay sweeps through the dip up and down a few times each, with effort times the
// readings the noise asks for, and judges the result: the down-sweep dip must lie below the
// up-sweep's by a play the gear can have (playParams.boundFactor times the nominal bound, and
// the fits' errors), with sweeps that repeat within a share of it.
func (p *op) measurePlay(fit dipFit, effort int) (play, error) {
	t := p.t
	k := &t.par.play
	noise, err := p.measureNoise()
	if err != nil {
		return play{}, err
	}
	w := math.Max(fit.HalfWidth, t.par.motion.minWidth)
	// A measurement assumes nothing of an earlier one (the play may have grown with wear): the
	// down sweeps cover the whole nominal bound, calibrated or not.
	u := float64(t.o.NominalBacklash)*t.par.motion.assumedPlay + k.slack
	// Each sweep must read playParams.fitWidths (and a margin) before the dip as well as past
	// it (symmetricFit). An up sweep begins the whole bound below the dip; a down sweep begins
	// above the up-sweep dip, which may be no more than the play above its own: its window
	// reaches that much further up.
	reach := math.Max(0, k.fitWidths+calibrationOvershoot-t.par.sweep.marginWidths) * w
	var ups, downs []float64
	for range k.sweeps {
		for _, dir := range []motion.Direction{motion.Up, motion.Down} {
			c, cu := fit.Centre, u
			if dir == motion.Down {
				c -= float64(t.o.NominalBacklash)*t.par.motion.assumedPlay - reach/2
				cu += reach / 2
			}
			g, err := p.refine(c, cu, w, noise, dir, false, effort)
			if err != nil {
				way := "upward"
				if dir == motion.Down {
					way = "downward"
				}
				return play{}, fmt.Errorf("%s sweep: %w", way, err)
			}
			if dir == motion.Up {
				ups = append(ups, g.Centre)
			} else {
				downs = append(downs, g.Centre)
			}
		}
	}
	pl := play{up: mean(ups), down: mean(downs), spread: math.Max(spreadOf(ups), spreadOf(downs))}
	// Two centres a spread d apart estimate a sweep's σ as d/√2; the mean of two has σ d/2, and
	// the difference of the up and the down means √2 times that: d/√2, with the worse spread
	// for both. Never less than the precision the sweeps were sized for, nor than what the
	// sweeps' repeating does not show: playParams.lopsided of the dip's half-width.
	pl.sigma = max(k.centreNoise, pl.spread/math.Sqrt2, k.lopsided*w)
	pl.b = motion.Steps(math.Round(pl.up - pl.down))
	bound := k.boundFactor*float64(t.o.NominalBacklash) + k.boundWidths*w + k.boundSteps
	switch {
	case pl.b < 0:
		return pl, fmt.Errorf("%w: down-sweep dip %.1f above the up-sweep %.1f", errInconsistentPlay, pl.down, pl.up)
	case float64(pl.b) > bound:
		return pl, fmt.Errorf("%w: %d steps, beyond the %0.f the gear can have", errInconsistentPlay, pl.b, bound)
	case pl.spread > math.Max(k.spreadWidths*w+k.spreadSteps, k.spreadShare*float64(pl.b)):
		return pl, fmt.Errorf("%w: sweeps repeat only within %.1f steps", errInconsistentPlay, pl.spread)
	}
	return pl, nil
}

func mean(v []float64) float64 {
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

func spreadOf(v []float64) float64 {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, x := range v {
		lo, hi = math.Min(lo, x), math.Max(hi, x)
	}
	return hi - lo
}

// calibrationOvershoot, dip half-widths, is how much further than playParams.fitWidths a
// calibration's sweep reads on either side of the dip: its fitted centre is not quite where the
// deepest reading was (the coupler's leakage moves the measured minimum off the resonance).
const calibrationOvershoot = 0.5

// symmetricFit fits a calibration sweep's dip again on the readings within playParams.fitWidths
// half-widths (w, or the first fit's where wider) of the first fit's centre, as far on one side
// as on the other (symmetricAround).
//
// Why: a sweep reads a long way before the dip (from where its window began) and only a little
// past it (where it stopped), and the up and down sweeps do so on opposite sides. Where the
// fitted curve is not exactly the dip's shape (a coupler of poor directivity adds a leakage that
// makes the dip lopsided; the capacitor's tuning is not linear in steps over a wide window), the
// fit's centre is pulled toward the side with the more readings: the up-sweep centre one way,
// the down-sweep centre the other, and the play comes out short or long by steps, with sweeps
// that repeat to a twentieth of one. On the same window either side of its centre, each sweep
// sees the same stretch of the same curve (the shaft lags the motor by the same half play all
// along a sweep): whatever bias is left is the same in both, and cancels in the difference.
func (p *op) symmetricFit(fit dipFit, samples []sample, w float64, noise noiseLevel) (dipFit, []sample, error) {
	// (the first fit's centre is pulled toward the side with the more readings: the window is
	// centred again on each refit's, until it stays put)
	r := p.t.par.play.fitWidths * math.Max(w, fit.HalfWidth)
	in := samples
	for range symmetricRefits {
		next := symmetricAround(samples, fit.Centre, r)
		if len(next) == len(in) && (len(in) == 0 || next[0] == in[0]) {
			break
		}
		f, err := fitDip(&p.t.par.fit, next, w, noise.rel)
		if err != nil {
			return dipFit{}, nil, err
		}
		fit, in = f, next
	}
	return fit, in, nil
}

// symmetricRefits is the most times symmetricFit centres its window again.
const symmetricRefits = 4

// symmetricAround keeps the samples within r of c, and no further on either side than the
// readings reach on the other.
func symmetricAround(samples []sample, c, r float64) []sample {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range samples {
		lo, hi = math.Min(lo, s.Pos), math.Max(hi, s.Pos)
	}
	r = math.Min(r, math.Min(c-lo, hi-c))
	var out []sample
	for _, s := range samples {
		if math.Abs(s.Pos-c) <= r {
			out = append(out, s)
		}
	}
	return out
}
