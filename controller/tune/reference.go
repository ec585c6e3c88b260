package tune

import (
	"fmt"
	"math"

	"github.com/tankd/tankd/controller/motion"
)

// reference finds the dip with the position untrusted (a freely turning capacitor with no
// switch) and re-references the axis so that the dip lands where the map has it.
func (p *op) reference(pred Prediction) (dipFit, error) {
	t := p.t
	if err := p.to(Referencing); err != nil {
		return dipFit{}, err
	}
	if pred.Source == SourceNone || t.o.HardStops {
		// (a capacitor with hard stops is never referenced by a search: Tune refuses earlier)
		return dipFit{}, fmt.Errorf("re-reference at %v: %w", p.res.Freq, ErrNoPrediction)
	}
	ax := t.d.Axis
	p.g.allowCarrier(t.o.ReferenceCarrierLimit) // the search may have to cover the whole travel
	ax.Reference(ax.Position())                 // provisional: the search needs to move
	ok := false
	defer func() {
		if !ok {
			ax.Distrust("re-reference did not finish")
		}
	}()
	noise, err := p.measureNoise()
	if err != nil {
		return dipFit{}, err
	}
	lo, hi := ax.SoftLimits()
	c, err := p.coarse((float64(lo)+float64(hi))/2, (float64(hi)-float64(lo))/2, pred.Width, noise, 0)
	if err != nil {
		return dipFit{}, err
	}
	fit, err := p.refineAround(c, pred.Width, noise)
	if err != nil {
		return dipFit{}, err
	}
	if fit.doubt != "" {
		// (never a reference from a fit that is not trusted)
		return dipFit{}, fmt.Errorf("%w: %s", ErrNoDip, fit.doubt)
	}
	ok = true
	shift := motion.Steps(math.Round(fit.Centre - pred.Pos))
	ax.Reference(ax.Position() - shift)
	fit.Centre -= float64(shift)
	p.res.Shift = shift
	t.surprise = nil
	t.note(p.res, "position re-referenced from the dip at %v: it was off by %d steps", p.res.Freq, shift)
	return fit, nil
}
