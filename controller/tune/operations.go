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
	if err := p.preposition(pred); err != nil {
		return "", err
	}
	if !req.RF {
		return Positioned, nil
	}
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
	if err := p.preposition(pred); err != nil {
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
		p.res.Backlash = pl.b
		t.note(p.res, "backlash %d steps (up-sweep dip %.1f, down-sweep %.1f, repeatability ±%.1f)", pl.b, pl.up, pl.down, pl.spread/2)
		fit.Centre = pl.up
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

// findDip puts the carrier on and finds the dip: from the prediction with the position trusted,
// by a search of the whole travel that re-references the position without.
func (p *op) findDip(pred Prediction) (dipFit, error) {
	if err := p.belowSweep(pred); err != nil {
		return dipFit{}, err
	}
	if err := p.carrierOn(); err != nil {
		return dipFit{}, err
	}
	if !p.t.d.Axis.Trusted() {
		return p.reference(pred)
	}
	return p.search(pred)
}

// belowSweep goes below the fine sweep's start before the carrier goes on, when the map is sure
// enough for the search to begin with the fine sweep (that move needs no RF; the sweep takes up
// the play on its way up).
func (p *op) belowSweep(pred Prediction) error {
	u, ok := p.t.direct(pred)
	if !ok {
		return nil
	}
	_, _, start, _ := p.window(pred.Pos, u, pred.Width, motion.Up)
	lmin, _ := p.t.d.Axis.SoftLimits()
	return p.move("fine", max(start-p.t.runUp(), lmin), passMove)
}

// search finds the dip around the prediction: straight to the fine sweep when the map is sure
// enough, otherwise a coarse scan first, widening the window up to the whole travel.
func (p *op) search(pred Prediction) (dipFit, error) {
	k := &p.t.par.scan
	w := pred.Width
	noise, err := p.measureNoise()
	if err != nil {
		return dipFit{}, err
	}
	lo, hi := p.t.d.Axis.SoftLimits()
	centre, half := (float64(lo)+float64(hi))/2, (float64(hi)-float64(lo))/2
	if pred.Source != SourceNone && pred.Trusted {
		if u, ok := p.t.direct(pred); ok {
			f, err := p.refineAround(coarseHit{pos: pred.Pos, uncertainty: u}, w, noise)
			if err == nil {
				return f, nil
			}
			if !errors.Is(err, errNotInWindow) {
				return dipFit{}, err
			}
		}
		centre, half = pred.Pos, k.windowSigmas*pred.Sigma+k.windowWidths*w
	}
	for {
		c, err := p.coarse(centre, half, w, noise)
		if err != nil {
			return dipFit{}, err
		}
		f, err := p.refineAround(c, w, noise)
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
