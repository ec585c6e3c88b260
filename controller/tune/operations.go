package tune

import (
	"context"
	"errors"
	"fmt"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

// Tune pre-positions the loop from the memory map at once (no RF), and with req.RF tunes it
// with a carrier: coarse scan if the map is not sure enough, fine sweep through the dip, curve
// fit, final approach with the gear play taken up, verify reading. A good tune teaches the map.
func (t *Tuner) Tune(ctx context.Context, req Request) Result {
	p := t.begin(ctx, req.Freq)
	return p.run(func() (Outcome, error) { return p.tune(req) })
}

func (p *op) tune(req Request) (Outcome, error) {
	pred, err := p.prepare("tune", req.Freq, req.RF)
	if err != nil {
		return "", err
	}
	if !req.RF {
		if err := p.preposition(pred); err != nil {
			return "", err
		}
		return Positioned, nil
	}
	// With RF to follow, the motor goes straight to where the search begins, with no stop at
	// the prediction on the way (search reports the prediction's position once there).
	fit, err := p.findDip(pred)
	if err != nil {
		return "", err
	}
	if err := p.settle(fit, pred); err != nil {
		return "", err
	}
	if err := p.endRF(); err != nil {
		return "", err
	}
	p.learn(pred)
	return Tuned, nil
}

// Calibrate measures the gear backlash at f: it tunes, then sweeps through the dip upward and
// downward twice each and compares the fitted centres (the shaft lags the motor by half the
// play either way). The result is installed in the axis and returned for storing. Sweeps that
// disagree (noise, not the gear) are repeated more slowly; if they still disagree the nominal
// play is kept, with a warning, and the outcome is that of the tune alone.
func (t *Tuner) Calibrate(ctx context.Context, f physic.Frequency) Result {
	p := t.begin(ctx, f)
	return p.run(func() (Outcome, error) { return p.calibrate(f) })
}

func (p *op) calibrate(f physic.Frequency) (Outcome, error) {
	t := p.t
	pred, err := p.prepare("calibrate", f, true)
	if err != nil {
		return "", err
	}
	fit, err := p.findDip(pred)
	if err != nil {
		return "", err
	}
	if err := p.to(Calibrating); err != nil {
		return "", err
	}
	outcome := Calibrated
	var pl play
	p.minCore, p.centreNoise = t.par.play.minCore, t.par.play.centreNoise
	defer func() { p.minCore, p.centreNoise = 0, 0 }()
	for effort := 1; ; effort *= t.par.sweep.retryGrowth {
		if pl, err = p.measurePlay(fit, effort); err == nil {
			break
		}
		if !errors.Is(err, errInconsistentPlay) && !errors.Is(err, errNotInWindow) && !errors.Is(err, errNoFit) {
			return "", fmt.Errorf("calibrate: %w", err)
		}
		if effort >= t.par.play.maxEffort {
			if t.calibrated {
				t.note(p.res, "backlash not measured (%v): keeping the %d steps measured before", err, t.d.Axis.Snapshot().Backlash)
			} else {
				t.note(p.res, "backlash not measured (%v): keeping the nominal %d steps", err, t.o.NominalBacklash)
			}
			outcome = Tuned
			break
		}
		t.note(p.res, "backlash sweeps disagree (%v): measuring again, more slowly", err)
	}
	if outcome == Calibrated {
		t.d.Axis.UseBacklash(pl.b)
		t.calibrated = true
		t.play = pl.up - pl.down
		t.playSigma = pl.sigma
		t.playSpeed = p.calSpeed
		p.res.Backlash = pl.b
		t.note(p.res, "backlash %d steps (up-sweep dip %.1f, down-sweep %.1f, repeatability ±%.2f)", pl.b, pl.up, pl.down, pl.sigma)
		fit.Centre, fit.doubt = pl.up, "" // (the calibration's own sweeps found it)
	}
	if err := p.settle(fit, pred); err != nil {
		return "", err
	}
	if err := p.endRF(); err != nil {
		return "", err
	}
	p.learn(pred)
	return outcome, nil
}

// Home runs the homing sequence on its own.
func (t *Tuner) Home(ctx context.Context) Result {
	p := t.begin(ctx, 0)
	return p.run(func() (Outcome, error) {
		if err := p.ready(); err != nil {
			return "", fmt.Errorf("home: %w", err)
		}
		if err := p.home(); err != nil {
			return "", err
		}
		return Homed, nil
	})
}

// Reference declares the motor to be at pos, as the operator says (for a capacitor with no home
// switch, after a lost position): the position is trusted from now on. It is refused with a
// fault latched, and while the motor moves.
func (t *Tuner) Reference(pos motion.Steps) error {
	if t.Fault() != nil || t.m.state == Faulted {
		return fmt.Errorf("tuner: reference: %w: reset first", motion.ErrFault)
	}
	if t.d.Axis.Snapshot().Moving {
		return fmt.Errorf("tuner: reference: %w", motion.ErrBusy)
	}
	t.d.Axis.Reference(pos)
	t.positionConfirmed()
	return nil
}

// prepare checks an operation at f before anything moves or keys: the frequency, a latched
// fault, the prediction's range; and, with the position untrusted, homes where there is a home
// switch or refuses where only the operator can say where the motor is (hard stops, or a
// freely turning capacitor with no RF to find the dip by). It returns the prediction to work
// from, also in the result.
func (p *op) prepare(what string, f physic.Frequency, rf bool) (Prediction, error) {
	t := p.t
	if f <= 0 {
		return Prediction{}, fmt.Errorf("%s: frequency %v: want more than 0", what, f)
	}
	if err := p.ready(); err != nil {
		return Prediction{}, fmt.Errorf("%s: %w", what, err)
	}
	pred := t.predict(f)
	p.res.Prediction = &pred
	if err := p.inRange(pred); err != nil {
		// nothing to tune there, whatever the position: no homing, no carrier
		return pred, err
	}
	if !t.d.Axis.Trusted() {
		switch {
		case t.o.HasHome:
			if err := p.home(); err != nil {
				return pred, err
			}
			pred = t.predict(f)
			p.res.Prediction = &pred
		case t.o.HardStops:
			return pred, fmt.Errorf("%s: %w (%s)", what, ErrHandReference, t.d.Axis.Snapshot().Distrust)
		case !rf:
			return pred, fmt.Errorf("%s: %w (%s)", what, ErrNeedsReference, t.d.Axis.Snapshot().Distrust)
		}
	}
	t.emit(Event{Kind: KindPrediction, Prediction: &pred, Freq: f, Pos: pred.Pos})
	return pred, nil
}

// home runs the homing sequence.
func (p *op) home() error {
	if err := p.to(Homing); err != nil {
		return err
	}
	if err := p.t.d.Axis.Home(p.ctx); err != nil {
		return fmt.Errorf("home: %w", err)
	}
	p.t.positionConfirmed()
	return nil
}

// positionConfirmed notes that the position was found again independently of the map (homing,
// or the operator's reference): a dip far from the map from now on is the map's error.
func (t *Tuner) positionConfirmed() {
	if t.surprise != nil {
		t.confirmed = true
	}
}

// preposition moves to the map's prediction, with no RF, if the position is trusted and the
// map (or its prior) knows something.
func (p *op) preposition(pred Prediction) error {
	t := p.t
	if !pred.Trusted || pred.Source == SourceNone {
		return nil
	}
	if err := p.to(Positioning); err != nil {
		return err
	}
	target := p.target(pred.Pos)
	if err := p.move("preposition", target, approachMove); err != nil {
		return err
	}
	p.res.Prepositioned, p.res.PrePos = true, target
	t.emit(Event{Kind: KindPositioned, Pos: float64(target), Freq: p.res.Freq})
	return nil
}

// positionedFrom reports the position the prediction gives, where the motor would have been
// pre-positioned, when the search that follows goes straight to its own start instead: the
// prediction placed the motor all the same (the search starts from it), and how far the dip turns
// out from it is what an operator, and the map's record of its own errors, judge it by. It is
// reported once the motor has got there, as a pre-position is.
func (p *op) positionedFrom(pred Prediction) {
	if !pred.Trusted || pred.Source == SourceNone {
		return
	}
	target := p.target(pred.Pos)
	p.res.Prepositioned, p.res.PrePos = true, target
	p.t.emit(Event{Kind: KindPositioned, Pos: float64(target), Freq: p.res.Freq,
		Text: "not stopped at: straight to the search's start"})
}

// findDip puts the carrier on and finds the dip: from the prediction with the position trusted,
// by a search of the whole travel that re-references the position without.
func (p *op) findDip(pred Prediction) (dipFit, error) {
	if !p.t.d.Axis.Trusted() {
		if err := p.carrierOn(); err != nil {
			return dipFit{}, err
		}
		return p.reference(pred)
	}
	return p.search(pred)
}

// search finds the dip around the prediction: straight to the fine sweep when the map is sure
// enough, otherwise a coarse scan first, widening the window up to the whole travel. The motor
// goes with no RF straight to where the first sweep or scan begins, and the carrier is keyed
// on the way so that it is there as the motor has settled.
func (p *op) search(pred Prediction) (dipFit, error) {
	t := p.t
	k := &t.par.scan
	w := pred.Width
	lo, hi := t.d.Axis.SoftLimits()
	centre, half := (float64(lo)+float64(hi))/2, (float64(hi)-float64(lo))/2
	var noise noiseLevel
	rf := false
	if pred.Source != SourceNone {
		if u, ok := t.direct(pred); ok {
			st := t.d.Axis.Snapshot()
			plan := p.planSweep(pred.Pos, u, w, st.Position, st.Play)
			var err error
			if noise, err = p.rfAt(plan.legs, w, plan.runUp, pred); err != nil {
				return dipFit{}, err
			}
			rf = true
			f, err := p.refineAroundEffort(coarseHit{pos: pred.Pos, uncertainty: u}, w, noise, 1, plan.dir)
			if err == nil {
				return f, nil
			}
			if !errors.Is(err, errNotInWindow) {
				return dipFit{}, err
			}
		}
		centre, half = pred.Pos, k.windowSigmas*pred.Sigma+k.windowWidths*w
	}
	var first motion.Direction
	given := pred
	if !rf {
		// where the first scan begins: the motor goes there with no RF
		st := t.d.Axis.Snapshot()
		slo, shi := p.scanWindow(centre, half)
		speed := p.scanSpeed(w, 1)
		if pred.Source == SourceNone {
			pred.Pos, pred.Sigma = centre, 0
		}
		plan := p.planScan(slo, shi, pred, st.Position, st.Play, speed)
		var err error
		if noise, err = p.rfAt(plan.legs, w, false, given); err != nil {
			return dipFit{}, err
		}
		first = plan.dir
	}
	for {
		c, err := p.coarse(centre, half, w, noise, first)
		if err != nil {
			return dipFit{}, err
		}
		f, err := p.sweepAfterScan(c, w, noise)
		if !errors.Is(err, errNotInWindow) || len(p.rejects) >= k.falseHits {
			return f, err
		}
		// A false alarm: the fine sweep saw no dip there. Scan on, ignoring that spot (only
		// the spot: the fine sweep may have missed a real dip nearby by a backlash guess).
		u := k.rejectWidths * w
		p.rejects = append(p.rejects, [2]float64{c.pos - u, c.pos + u})
		p.t.emit(Event{Kind: KindNote, Text: fmt.Sprintf("no dip near %.0f after all: scanning on", c.pos)})
	}
}

// rfAt takes the motor along legs with no RF (positioning) and begins the RF stages there: the
// carrier is keyed a measured key-up time before the motor arrives, so that both are ready
// together. Then the reading noise is measured with the motor still, unless an earlier
// measurement makes that needless for a dip of half-width w (noiseKnown). (Where an earlier
// measurement is pooled with the new one, the motor does not wait to settle: its ringing, far
// off the dip, can only make the few new readings look noisier, which slows the sweep a little,
// never speeds it.)
//
// Once the motor is there, the position the prediction pred gave is reported (positionedFrom).
func (p *op) rfAt(legs []motion.Steps, w float64, runUp bool, pred Prediction) (noiseLevel, error) {
	t := p.t
	known, ok := p.noiseKnown(w)
	start := p.startRF
	if ok && runUp && t.keyLead() > 0 {
		// no reading before the sweep, which begins with its own run-up: it keys on the way
		start = p.armRF
	}
	if len(legs) > 0 {
		if err := p.to(Positioning); err != nil {
			return noiseLevel{}, err
		}
		if err := p.travel("position", legs, !t.noiseFresh(), t.keyLead(), start); err != nil {
			return noiseLevel{}, err
		}
	} else if err := start(); err != nil {
		return noiseLevel{}, err
	}
	p.positionedFrom(pred)
	if p.dropped {
		p.noise = known
		t.emit(Event{Kind: KindNoise, Freq: p.res.Freq, Gamma2: known.gamma,
			Text: fmt.Sprintf("reading noise %.2f %% relative, %.4f absolute as measured before: too low to matter", 100*known.rel, known.abs)})
		return known, nil
	}
	if err := p.awaitCarrier(); err != nil {
		return noiseLevel{}, err
	}
	if !ok {
		return p.measureNoise()
	}
	if sp := p.spare; sp != nil && p.baseline == 1 && sp.r.Gamma2() > t.par.noise.offDipGamma2 {
		p.baseline = sp.r.Gamma2() // the coupler's own off-dip reading, where the sweep begins
	}
	p.noise = known
	t.emit(Event{Kind: KindNoise, Freq: p.res.Freq, Gamma2: known.gamma,
		Text: fmt.Sprintf("reading noise %.2f %% relative, %.4f absolute as measured before: too low to matter", 100*known.rel, known.abs)})
	return known, nil
}

// sweepAfterScan runs the fine sweep through the dip a scan found, from where the scan stopped:
// upward, or downward where the play is measured and that is quicker (planSweep). The carrier is
// dropped for the legs to the sweep's start where that saves more carrier time than keying again
// costs.
func (p *op) sweepAfterScan(c coarseHit, w float64, noise noiseLevel) (dipFit, error) {
	t := p.t
	if err := p.to(Refining); err != nil {
		return dipFit{}, err
	}
	st := t.d.Axis.Snapshot()
	plan := p.planSweep(c.pos, c.uncertainty, w, st.Position, st.Play)
	if len(plan.legs) > 0 {
		lead := t.keyLead()
		settle := noise.clipped // (the noise is measured again at the start, with the motor still)
		if p.keyed && lead > 0 && p.legsTime(st.Position, plan.legs, settle)-lead >= t.par.rf.rekeyGain {
			if err := p.dropCarrier(); err != nil {
				return dipFit{}, err
			}
			if err := p.travel("fine", plan.legs, settle, lead, p.rekey); err != nil {
				return dipFit{}, err
			}
			if err := p.awaitCarrier(); err != nil {
				return dipFit{}, err
			}
		} else if err := p.travel("fine", plan.legs, settle, 0, nil); err != nil {
			return dipFit{}, err
		}
	}
	if noise.clipped {
		// measured where the readings clip at full reflection: measure again here, nearer
		// the dip, with the motor still
		var err error
		if noise, err = p.measureNoise(); err != nil {
			return dipFit{}, err
		}
	}
	return p.refineAroundEffort(c, w, noise, 1, plan.dir)
}

// endRF ends the RF stages once the tune is verified: the carrier is dropped, and the radio
// must still be on the frequency it was keyed on, or nothing the stages found may be learned.
func (p *op) endRF() error {
	if err := p.check(); err != nil {
		return err
	}
	if err := p.carrierOff(); err != nil {
		return err
	}
	if moved, ok := p.g.frequencyMoved(); ok {
		return fmt.Errorf("%w: the radio went to %v", ErrFrequencyChanged, moved)
	}
	return nil
}
