package tune

import (
	"fmt"
	"math"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
)

// settle makes the final approach to the fitted centre and verifies it. A centre found sweeping
// down and turned by the measured play is first placed by readings at two whole steps, standing
// still (placeByReadings). The verified SWR must be within the target and as low as the fitted
// dip promised, within what the measured noise and a whole step's placement allow; otherwise
// the dip is swept again with more readings and verified with twice as many, and if it still
// fails the loop is reported not tuned.
func (p *op) settle(fit dipFit, pred Prediction) error {
	t := p.t
	k := &t.par.verify
	for attempt := 0; ; attempt++ {
		if err := p.to(Approaching); err != nil {
			return err
		}
		w := pred.Width
		if fit.HalfWidth > 0 {
			w = fit.HalfWidth
		}
		target := p.target(fit.Centre)
		if n := p.compareReadings(fit, w); n > 0 {
			var err error
			if target, err = p.placeByReadings(&fit, n); err != nil {
				return err
			}
		}
		if err := p.approach(target); err != nil {
			return err
		}
		if err := p.to(Verifying); err != nil {
			return err
		}
		n := p.verifyReadings(fit, w) << attempt
		g, err := p.meanGamma2(n)
		if err != nil {
			return err
		}
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
		noise, err := p.resweepNoise()
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

// resweepNoise measures the noise again before a resweep, standing at the dip's bottom. There
// the readings lie near the converter's absolute floor, and their spread in ln |Γ|² can be that
// floor's, many times a log detector's relative noise (and a reading or two placed late, off
// the dip, add their own); taken for the noise off the dip, it buries the dip itself: the sweep
// then finds no dip deeper than the noise and leaves the loop off its resonance. The noise is
// kept only up to what still lets a dip absorbing half the power stand clear after the most
// averaging (the first measurement's where that was more): at more, no sweep could find the dip
// at all.
func (p *op) resweepNoise() (noiseLevel, error) {
	t := p.t
	before := p.noise
	noise, err := p.measureNoise()
	if err != nil {
		return noiseLevel{}, err
	}
	lim := math.Max(before.offDip(), 0.5*math.Sqrt(float64(t.par.scan.maxAveraging))/t.par.sweep.deepSigmas)
	if noise.rel > lim || noise.abs > lim {
		noise.rel, noise.abs = math.Min(noise.rel, lim), math.Min(noise.abs, lim)
		p.noise = noise
	}
	return noise, nil
}

// meanGamma2 is the mean |Γ|² of n verify readings taken where the motor stands.
func (p *op) meanGamma2(n int) (float64, error) {
	g := 0.0
	for range n {
		s, _, err := p.read("verify")
		if err != nil {
			return 0, err
		}
		g += s.Gamma2
	}
	return g / float64(n), nil
}

// compareReadings is how many readings placeByReadings takes at each of the two whole steps
// ending at the one nearest the fit's centre: none for a centre found sweeping up, none where a
// step off the centre costs less than the SWR budget (a wide dip: a step's error loses nothing
// that matters), where the fit has no curve to compare with, and where more than
// verifyParams.compareReadings would be needed to place the curve within
// verifyParams.compareSigma steps (a noisy bottom on a wide dip).
//
// Why: a centre found sweeping down is turned into final-approach coordinates by the play a
// calibration measured, at another speed and on another dip; that play has been seen a step or
// two off what the sweep met, on a dip whose half-width is a dozen steps, where a step costs
// more than the 0.1 SWR a tune may fall short by. The error moves the whole fitted curve, not its
// shape. Readings taken standing still, at whole steps the motor has reached moving up (as the
// tune's final position is), carry no play and no placement error, and put the curve back.
func (p *op) compareReadings(fit dipFit, w float64) int {
	k := &p.t.par.verify
	if !fit.viaPlay || fit.doubt != "" || fit.HalfWidth <= 0 || w <= 0 || math.IsNaN(fit.curve.Gamma2At(fit.Centre)) {
		return 0
	}
	// a step off the loop's resonance, on a Lorentzian of half-width w: |Γ|² = 1/(1 + w²)
	if sense.SWRFromGamma2(1/(1+w*w))-1 <= p.t.par.sweep.swrBudget {
		return 0
	}
	lo := math.Round(fit.Centre) - 1
	if l := p.target(lo); float64(l) != lo || p.target(lo+1) != l+1 {
		return 0 // (at a soft limit: the fit decides)
	}
	sens := math.Abs(shiftSlope(fit.curve, lo))
	g := math.Max(math.Min(fit.curve.Gamma2At(lo), fit.curve.Gamma2At(lo+1)), 0)
	// (the noise at the bottom, as the sweep's residuals there show it, where that is more)
	sd := math.Max(p.noise.rel*math.Max(g, k.gammaFloor)+p.t.par.noise.absFloor, fit.nearNoise)
	if !(sens > 0) {
		return 0
	}
	n := int(math.Ceil(2 * math.Pow(sd/(sens*k.compareSigma), 2)))
	if n > k.compareReadings {
		return 0
	}
	return max(n, 1)
}

// shiftSlope is how fast the difference c(lo+1) − c(lo) of curve c changes as the curve is moved
// up the axis, per step.
func shiftSlope(c curve, lo float64) float64 {
	const h = 0.05
	d := func(s float64) float64 { return c.Gamma2At(lo+1-s) - c.Gamma2At(lo-s) }
	return (d(h) - d(-h)) / (2 * h)
}

// placeByReadings takes n readings at each of two whole steps, lo and lo+1 (lo+1 the one nearest
// the fit's centre, so that the final approach usually ends there and need not come back),
// standing still and reached moving up with the play taken up as for the final position (lo by
// the final approach's run-up, lo+1 one step on), and moves the fitted curve along the axis until
// the difference between its values at those steps is the measured one. The curve's shape (its
// width and the coupler's leakage) is the sweep's; where it lies is the readings'. It returns
// the whole step nearest the moved centre, which the final approach then reaches (further up at
// once, or back below by way of the run-up). A difference the curve cannot give within
// verifyParams.compareShift steps (nor half its width) leaves the fit as it was.
func (p *op) placeByReadings(fit *dipFit, n int) (motion.Steps, error) {
	k := &p.t.par.verify
	lo := p.target(math.Round(fit.Centre) - 1)
	if err := p.approach(lo); err != nil {
		return 0, err
	}
	g0, err := p.meanGamma2(n)
	if err != nil {
		return 0, err
	}
	if err := p.travel("approach", []motion.Steps{lo + 1}, true, 0, nil); err != nil {
		return 0, err
	}
	g1, err := p.meanGamma2(n)
	if err != nil {
		return 0, err
	}
	c, x := fit.curve, float64(lo)
	diff := func(s float64) float64 { return c.Gamma2At(x+1-s) - c.Gamma2At(x-s) - (g1 - g0) }
	// the difference falls as the curve moves up, within its half-width of the middle
	a, b := -k.compareShift, k.compareShift
	if m := fit.HalfWidth / 2; m < b {
		a, b = -m, m
	}
	if !(diff(a) >= 0 && diff(b) <= 0) {
		p.t.note(p.res, "readings at steps %d and %d differ by %.4f, more than the fit allows within %.1f steps: the fit's centre kept",
			lo, lo+1, g1-g0, b)
		return p.target(fit.Centre), nil
	}
	for range 50 {
		m := (a + b) / 2
		if diff(m) > 0 {
			a = m
		} else {
			b = m
		}
	}
	s := (a + b) / 2
	if to := p.target(fit.Centre + s); to != p.target(fit.Centre) {
		p.t.note(p.res, "readings at steps %d and %d put the dip %+.1f steps from the sweep's centre: step %d",
			lo, lo+1, s, to)
	}
	fit.Centre += s
	fit.curve.ref += s
	return p.target(fit.Centre), nil
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
