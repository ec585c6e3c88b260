package tune

import (
	"fmt"
	"math"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
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
		if err := p.approach(target); err != nil {
			return err
		}
		if err := p.to(Verifying); err != nil {
			return err
		}
		w := pred.Width
		if fit.HalfWidth > 0 {
			w = fit.HalfWidth
		}
		n := p.verifyReadings(fit, w) << attempt
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
		limit := math.Min(t.o.TargetSWR, sense.SWRFromGamma2(p.verifyLimit(fit, w, n)))
		p.res.SWR = swr
		p.res.Fit = t.report(fit, pred, p.res.Freq)
		t.emit(Event{Kind: KindFit, Fit: p.res.Fit, Pos: fit.Centre, Freq: p.res.Freq, SWR: p.res.Fit.MinSWR})
		floor := p.verifyFloor(fit, w, n, target)
		if fit.doubt != "" {
			return fmt.Errorf("%w: verified SWR %.2f at the centre of a doubtful fit (%s): left there",
				ErrNotTuned, swr, fit.doubt)
		}
		if swr <= limit && g >= floor {
			return nil
		}
		if p.res.Fit.MinSWR > t.o.TargetSWR {
			// A fit whose bottom reads above the target was already swept with the most
			// readings (refineAroundEffort): a slower sweep cannot make the dip deeper. If the
			// verify agrees with it the loop is at its best here; either way it is left at the
			// dip, and nothing is learned, as the target was not met.
			agree := "agrees with"
			if swr > sense.SWRFromGamma2(p.verifyLimit(fit, w, n)) {
				agree = "is above"
			}
			return fmt.Errorf("%w: verified SWR %.2f %s the fitted dip's bottom %.2f, above the target %.2f: left at the dip",
				ErrNotTuned, swr, agree, p.res.Fit.MinSWR, t.o.TargetSWR)
		}
		if attempt == k.maxResweeps {
			if g < floor {
				return fmt.Errorf("%w: verified SWR %.2f, below the %.2f the fit allows there: the fit does not describe the dip (fitted dip %.2f)",
					ErrNotTuned, swr, sense.SWRFromGamma2(math.Max(floor, 0)), p.res.Fit.MinSWR)
			}
			return fmt.Errorf("%w: verified SWR %.2f, above %.2f (target %.2f, fitted dip %.2f)",
				ErrNotTuned, swr, limit, t.o.TargetSWR, p.res.Fit.MinSWR)
		}
		if g < floor {
			t.note(p.res, "verify SWR %.2f below the %.2f the fit allows there: the fit is doubtful, sweeping again, more slowly",
				swr, sense.SWRFromGamma2(math.Max(floor, 0)))
		} else {
			t.note(p.res, "verify SWR %.2f above the %.2f the fit allows: sweeping again, more slowly", swr, limit)
		}
		noise, err := p.measureNoise()
		if err != nil {
			return err
		}
		f, err := p.refineAroundEffort(coarseHit{pos: fit.Centre, uncertainty: k.resweepSlack + w}, w, noise, k.resweepEffort, motion.Up)
		if err != nil {
			return err
		}
		fit = f
	}
}

// approach makes the final approach to target: moving up with the gear play taken up, straight
// there when the motor stands low enough (after a sweep downward), else by way of a run-up point
// below it, and settles. The carrier is dropped for the move when that saves more carrier time
// than keying again costs (rfParams.rekeyGain): the tuner keys again during the move, a
// measured key-up time before the motor has settled, so that the carrier is back for the
// verify reading as the motor is.
func (p *op) approach(target motion.Steps) error {
	t := p.t
	st := t.d.Axis.Snapshot()
	legs := p.legsTo(st.Position, st.Play, target, motion.Up)
	if len(legs) == 0 {
		return p.check()
	}
	lead := t.keyLead()
	if !p.keyed || lead == 0 || p.legsTime(st.Position, legs, true)-lead < t.par.rf.rekeyGain {
		return p.travel("approach", legs, true, 0, nil)
	}
	if err := p.dropCarrier(); err != nil {
		return err
	}
	// (the verify's first reading waits for the carrier)
	return p.travel("approach", legs, true, lead, p.rekey)
}

// verifyReadings is how many readings the first verify averages: enough that their noise
// (verifyParams.sigmas standard errors of the mean) stays within what the verify allows for
// placement and the fit's own error, so that the noise does not loosen the check; at least
// verifyParams.minReadings, at most verifyParams.readings.
func (p *op) verifyReadings(fit dipFit, w float64) int {
	k := &p.t.par.verify
	g0 := math.Max(fit.MinGamma2, 0)
	allow := (1-g0)*math.Min(1, (k.misplace/w)*(k.misplace/w)) + k.slack
	sd := p.noise.rel*math.Max(g0, k.gammaFloor) + p.t.par.noise.absFloor
	n := int(math.Ceil(math.Pow(k.sigmas*sd/allow, 2)))
	return min(max(n, k.minReadings), k.readings)
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

// verifyFloor is the lowest mean |Γ|² of n verify readings at target that still agrees with
// the fit: the lowest the fitted curve reaches within verifyParams.misplace steps of target (its
// bottom where it has no curve), less a few standard errors of the mean and the allowance for
// the fit's own error. A verify well below it says the fit missed the dip's bottom (a sweep too
// sparse, or its readings misplaced, so that the curve is too shallow or off-centre): the tune
// landed on a dip the fit does not describe, and a tune is never accepted from such a fit.
func (p *op) verifyFloor(fit dipFit, w float64, n int, target motion.Steps) float64 {
	k := &p.t.par.verify
	low := fit.MinGamma2
	for _, d := range []float64{-k.misplace, 0, k.misplace} {
		if g := fit.curve.Gamma2At(float64(target) + d); g < low {
			low = g
		}
	}
	low = math.Max(low, 0)
	sd := p.noise.rel*math.Max(low, k.gammaFloor) + p.t.par.noise.absFloor
	return low - k.sigmas*sd/math.Sqrt(float64(n)) - k.slack
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
