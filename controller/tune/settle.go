package tune

import (
	"fmt"
	"math"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/sense"
)

// settle makes the final approach to the fitted centre and verifies it. The verified SWR must
// be within the target and as low as the fitted dip promised, within what the measured noise
// and a whole step's placement allow; otherwise the dip is swept again with more readings and
// verified with twice as many, and if it still fails the loop is reported not tuned.
func (p *op) settle(fit dipFit, pred Prediction) error {
	t := p.t
	k := &t.par.verify
	for attempt := 0; ; attempt++ {
		if err := p.to(Approaching); err != nil {
			return err
		}
		target := p.target(fit.Centre)
		if err := p.move("approach", target, approachMove); err != nil {
			return err
		}
		if err := p.to(Verifying); err != nil {
			return err
		}
		n := k.readings << attempt
		g := 0.0
		for range n {
			s, _, err := p.read("verify")
			if err != nil {
				return err
			}
			g += s.Gamma2
		}
		g /= float64(n)
		swr := sense.SWRFromGamma2(g)
		w := pred.Width
		if fit.HalfWidth > 0 {
			w = fit.HalfWidth
		}
		limit := math.Min(t.o.TargetSWR, sense.SWRFromGamma2(p.verifyLimit(fit, w, n)))
		p.res.SWR = swr
		p.res.Fit = t.report(fit, pred, p.res.Freq)
		t.emit(Event{Kind: KindFit, Fit: p.res.Fit, Pos: fit.Centre, Freq: p.res.Freq, SWR: p.res.Fit.MinSWR})
		if swr <= limit {
			return nil
		}
		if attempt == k.maxResweeps {
			return fmt.Errorf("%w: verified SWR %.2f, above %.2f (target %.2f, fitted dip %.2f)",
				ErrNotTuned, swr, limit, t.o.TargetSWR, p.res.Fit.MinSWR)
		}
		t.note(p.res, "verify SWR %.2f above the %.2f the fit allows: sweeping again, more slowly", swr, limit)
		noise, err := p.measureNoise()
		if err != nil {
			return err
		}
		f, err := p.refineAroundEffort(coarseHit{pos: fit.Centre, uncertainty: k.resweepSlack + w}, w, noise, k.resweepEffort)
		if err != nil {
			return err
		}
		fit = f
	}
}

// verifyLimit is the highest mean |Γ|² of n verify readings that still agrees with the fit: its
// minimum, plus what a placement error of up to verifyParams.misplace steps costs on a dip of
// half-width w, plus a few standard errors of the mean of n readings at that level (a log
// detector's noise is relative, with a floor), plus a small allowance for the fit's own error.
func (p *op) verifyLimit(fit dipFit, w float64, n int) float64 {
	k := &p.t.par.verify
	g0 := math.Max(fit.MinGamma2, 0)
	place := (1 - g0) * math.Min(1, (k.misplace/w)*(k.misplace/w))
	sd := p.noise.rel*math.Max(g0, k.gammaFloor) + p.t.par.noise.absFloor
	return g0 + place + k.sigmas*sd/math.Sqrt(float64(n)) + k.slack
}

// report turns a fit into what the operator sees: the loaded Q and bandwidth follow from the
// fitted width and the map's slope.
func (t *Tuner) report(f dipFit, pred Prediction, freq physic.Frequency) *FitReport {
	r := &FitReport{Method: f.Method, Centre: f.Centre, HalfWidth: f.HalfWidth, Chi2: f.Chi2, Samples: f.N,
		MinSWR: sense.SWRFromGamma2(math.Max(f.MinGamma2, 0)), curve: f.curve}
	if f.HalfWidth > 0 && pred.Slope != 0 {
		r.Bandwidth = 2 * f.HalfWidth / math.Abs(pred.Slope)
		r.QLoaded = float64(freq) / float64(physic.Hertz) / r.Bandwidth
	}
	return r
}
