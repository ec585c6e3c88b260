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
	var ups, downs []float64
	for range k.sweeps {
		for _, dir := range []motion.Direction{motion.Up, motion.Down} {
			c := fit.Centre
			if dir == motion.Down {
				c -= float64(t.o.NominalBacklash) * t.par.motion.assumedPlay
			}
			g, err := p.refine(c, u, w, noise, dir, false, effort)
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
