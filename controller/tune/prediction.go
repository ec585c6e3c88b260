package tune

import (
	"fmt"
	"math"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
)

// Prediction is where the tuner expects the dip before it transmits: the memory map's
// prediction, with the loaded Q filled in from Options.DefaultQ where the map knows none, and
// what the tuner adds to it.
type Prediction struct {
	memmap.Prediction
	Width   float64 // expected half-power half-width of the dip, steps, from Q and the slope
	Trusted bool    // the axis position is trusted
}

// SourceNone is a Prediction's Source when neither the map nor a prior knows anything (the
// same as memmap.SourceNone).
const SourceNone = memmap.SourceNone

// learned says whether the prediction rests on points the map learned, rather than on the
// physics prior alone or on nothing.
func (p Prediction) learned() bool {
	return p.Source == memmap.SourceMap || p.Source == memmap.SourceAnchored
}

// predict asks the map where the dip is and how wide it should be.
func (t *Tuner) predict(f physic.Frequency) Prediction {
	temp, _ := t.temperature()
	p := Prediction{
		Prediction: memmap.Prediction{Source: SourceNone, Q: t.o.DefaultQ},
		Width:      t.o.FallbackWidth,
		Trusted:    t.d.Axis.Trusted(),
	}
	mp, ok := t.d.Map.Predict(f, t.d.Clock.Now(), temp)
	if !ok {
		return p
	}
	p.Prediction = mp
	if !(mp.Q > 0) {
		p.Q = t.o.DefaultQ
	}
	if mp.Slope != 0 {
		fHz := float64(f) / float64(physic.Hertz)
		p.Width = math.Abs(mp.Slope) * fHz / (2 * p.Q)
	}
	p.Width = math.Max(p.Width, t.par.motion.minWidth)
	return p
}

// inRange refuses a frequency whose dip the prediction puts well outside the soft limits:
// there is nothing to tune there, and no reason to transmit. The physics prior knows that as
// well as a learned map, and either knows it whether or not the position is trusted.
func (p *op) inRange(pred Prediction) error {
	if pred.Source == SourceNone {
		return nil
	}
	lo, hi := p.t.d.Axis.SoftLimits()
	n := p.t.par.motion.rangeSigmas
	if pred.Pos+n*pred.Sigma < float64(lo) || pred.Pos-n*pred.Sigma > float64(hi) {
		return fmt.Errorf("%w: the dip is expected at %.0f±%.0f, outside the soft limits %d–%d",
			ErrOutOfRange, pred.Pos, pred.Sigma, lo, hi)
	}
	return nil
}

// direct says whether the prediction is good enough to go straight to the fine sweep, and
// with what uncertainty.
func (t *Tuner) direct(pred Prediction) (u float64, ok bool) {
	if pred.Source == SourceNone || !pred.Trusted {
		return 0, false
	}
	k := &t.par.sweep
	u = k.directSigmas*pred.Sigma + k.directSlack
	return u, u <= k.directWidths*pred.Width
}
