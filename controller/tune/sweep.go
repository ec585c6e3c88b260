package tune

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"time"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
)

// errNotInWindow: a fine sweep saw no dip, or only its edge; the caller scans wider.
var errNotInWindow = errors.New("dip not within the fine sweep")

// errDoubtfulFit: a fit the tuner will not act on, let alone learn from.
var errDoubtfulFit = fmt.Errorf("%w: doubtful", errNoFit)

// errDownDoubt: a fit found sweeping down that is not clean enough for the play to turn its
// centre into final-approach coordinates (χ² above sweepParams.maxDownChi2, rough, or its bottom
// above the target): the dip is swept again upward.
var errDownDoubt = fmt.Errorf("%w sweeping down", errDoubtfulFit)

// aboveTargetError: a fit that is sound but whose bottom reads an SWR above the target. It is
// doubtful at first (a mis-sampled sweep can make a dip look shallow) and is swept again with
// more readings; a fit that still reads above the target at the most effort is the dip as the
// coupler sees it (a loop matched poorly at this frequency, a coupler of poor directivity), and
// the tuner goes there rather than leave the loop off its resonance.
type aboveTargetError struct {
	fit dipFit
	swr float64
	max float64 // the target
}

func (e *aboveTargetError) Error() string {
	return fmt.Sprintf("%v: %s fit with SWR %.2f at its bottom, above the target %.2f", errDoubtfulFit, e.fit.Method, e.swr, e.max)
}
func (e *aboveTargetError) Unwrap() error { return errDoubtfulFit }

// roughError: a fit whose residuals are larger than the noise and the readings' placement
// explain (reduced χ² above sweepParams.maxChi2): readings misplaced by a loaded computer, or a
// disturbance during the sweep. It is swept again with more readings; a fit still this rough at
// the most effort is not acted on as a tune, but its centre is a better place to leave the loop
// than wherever the last sweep stopped (refineAroundEffort, settle).
type roughError struct{ fit dipFit }

func (e *roughError) Error() string {
	return fmt.Sprintf("%v: %s fit with χ² %.0f", errDoubtfulFit, e.fit.Method, e.fit.Chi2)
}
func (e *roughError) Unwrap() error { return errDoubtfulFit }

// edgeError: the fine sweep's deepest point lay at its end, so the dip is further on.
type edgeError struct {
	toward  float64
	spacing float64
}

func (e *edgeError) Error() string {
	return fmt.Sprintf("the dip lies beyond the sweep, near %.0f", e.toward)
}
func (e *edgeError) Unwrap() error { return errNotInWindow }

// widerError: the fitted dip is wider than the sweep was planned for (the prediction's width
// too small), and the sweep did not reach its half-power point on one side: a centre that rests
// on one flank and the curve's extrapolation is doubtful; the dip is swept again around it, sized
// for the width it has.
type widerError struct {
	centre, width float64
	spacing       float64
	side          string
}

func (e *widerError) Error() string {
	return fmt.Sprintf("%v: the readings stop short of the dip's half-width %.1f steps %s the centre", errDoubtfulFit, e.width, e.side)
}
func (e *widerError) Unwrap() error { return errDoubtfulFit }

// refineAround runs the fine sweep around a coarse estimate, upward, following the dip if the
// sweep shows it lies beyond.
func (p *op) refineAround(c coarseHit, w float64, noise noiseLevel) (dipFit, error) {
	return p.refineAroundEffort(c, w, noise, 1, motion.Up)
}

// refineAroundEffort runs the fine sweep around c (in final-approach coordinates) in direction
// dir with effort times the readings the noise asks for, following the dip if the sweep shows it
// lies beyond. A fit that fails or is doubtful is swept again with more readings (more
// averaging), up to sweepParams.maxEffort times the first: noise and late readings cost time,
// not correctness. A sweep downward finds the dip in the coordinates of a downward motion; the
// measured play turns its centre into final-approach coordinates (the caller sweeps down only
// with the play calibrated).
func (p *op) refineAroundEffort(c coarseHit, w float64, noise noiseLevel, effort int, dir motion.Direction) (dipFit, error) {
	k := &p.t.par.sweep
	off := p.playOffset(dir)
	pos, u := c.pos-off, c.uncertainty
	edges := 0
	// (a caller already refining has reported it; each further sweep is reported again)
	again := p.t.m.state != Refining
	for {
		f, err := p.refine(pos, u, w, noise, dir, again, effort)
		again = true
		if err == nil {
			f.Centre += off
			f.curve.ref += off // (the curve too: the verify and the final step read it there)
			f.viaPlay = off != 0
			return f, nil
		}
		var edge *edgeError
		var wide *widerError
		var high *aboveTargetError
		var rough *roughError
		switch {
		case errors.As(err, &edge) && edges < k.maxFollows:
			edges++
			pos, u = edge.toward, k.uncertainWidths*w+edge.spacing
		case errors.Is(err, errDownDoubt):
			// the same sweep upward, which needs no play: its readings are in final-approach
			// coordinates
			p.t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%v: sweeping again upward", err)})
			pos, dir, off = pos+off, motion.Up, 0
		case errors.As(err, &wide) && edges < k.maxFollows:
			edges++
			w = math.Max(w, wide.width)
			pos, u = wide.centre, k.wideUncertainty*w+wide.spacing
			p.t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%v: sweeping again around %.0f", err, wide.centre+off)})
		case errors.Is(err, errNoFit) && effort < k.maxEffort:
			effort *= k.retryGrowth
			p.t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%v: sweeping again with %d× the readings", err, effort)})
		case errors.As(err, &rough):
			// Still rough at the most readings: the loop is left at its centre, not tuned.
			p.t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%v: going to its centre, but not trusting it", err)})
			f := rough.fit
			f.doubt = err.Error()
			return f, nil
		case errors.As(err, &high):
			// Swept with the most readings and still above the target: that is the dip. The
			// verify decides whether the loop is tuned (settle).
			p.t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%v: the best this loop reaches here", err)})
			// (found sweeping up: refine turns such a fit found sweeping down into errDownDoubt)
			return high.fit, nil
		case errors.Is(err, errNoFit):
			return dipFit{}, fmt.Errorf("%w: %w", ErrNoDip, err)
		default:
			return dipFit{}, err
		}
	}
}

// playOffset is what turns a position found moving in dir into final-approach coordinates: the
// play, moving down.
func (p *op) playOffset(dir motion.Direction) float64 {
	if dir == motion.Down {
		return p.backlashEstimate()
	}
	return 0
}

// window is the span a fine sweep covers around centre (in the motor coordinates of a sweep in
// dir), and where it starts and ends: kept clear of the soft limit behind it by a run-up.
func (p *op) window(centre, u, w float64, dir motion.Direction) (lo, hi float64, start, end motion.Steps) {
	m := p.t.par.sweep.marginWidths
	lo = p.clampPos(centre - u - m*w)
	hi = p.clampPos(centre + u + m*w)
	lmin, lmax := p.t.d.Axis.SoftLimits()
	if dir == motion.Up && lo < float64(lmin+p.t.runUp()) {
		lo = float64(lmin + p.t.runUp())
	}
	if dir == motion.Down && hi > float64(lmax-p.t.runUp()) {
		hi = float64(lmax - p.t.runUp())
	}
	start, end = motion.Steps(math.Floor(lo)), motion.Steps(math.Ceil(hi))
	if dir == motion.Down {
		start, end = end, start
	}
	return lo, hi, start, end
}

// sweepSpeed is the fine sweep's speed for a dip of half-width w: the readings within ±w the
// fit needs for its centre's standard error to reach the precision a tune needs (see
// sweepParams.swrBudget), at the reading noise sigma (relative, on the flanks), with effort
// times as many; and the spacing of its readings.
func (p *op) sweepSpeed(w, sigma float64, effort int) (speed, spacing float64) {
	k := &p.t.par.sweep
	// σ_c ≈ centreFactor·w·σ/√N. A placement error δ costs an SWR of about 2δ/w at a perfect
	// match (less where the match is not perfect), so the budget allows δ = swrBudget·w/2, and
	// the centre's standard error is held to a centreSigmas-th of it; never finer than
	// Options.CentreNoise asks.
	target := math.Max(p.t.o.CentreNoise, k.swrBudget*w/(2*k.centreSigmas))
	if p.centreNoise > 0 {
		target = p.centreNoise // (a calibration's, whatever the width)
	}
	nCore := math.Pow(k.centreFactor*w*sigma/target, 2)
	nCore = math.Min(math.Max(nCore, max(k.minCore, p.minCore)), k.maxCore) * float64(effort)
	spacing = math.Min(math.Max(2*w/nCore, k.minSpacing), k.maxSpacing*w)
	speed = math.Max(spacing/p.readingTime().Seconds(), k.minSpeed)
	return speed, spacing
}

// refine sweeps through the window around centre (its uncertainty u and a margin of
// sweepParams.marginWidths dip half-widths beyond, in the motor coordinates of a sweep in dir)
// in direction dir, reading on the move, and fits the resonance. The sweep's speed is sized from
// the measured noise (sweepSpeed). The fit's centre is in the same coordinates as centre.
func (p *op) refine(centre, u, w float64, noise noiseLevel, dir motion.Direction, changeState bool, effort int) (dipFit, error) {
	t := p.t
	ax := t.d.Axis
	k := &t.par.sweep
	if changeState {
		if err := p.to(Refining); err != nil {
			return dipFit{}, err
		}
	}
	lo, hi, start, end := p.window(centre, u, w, dir)
	fg := t.par.noise.flankGamma2
	speed, spacing := p.sweepSpeed(w, noise.flank(fg)/fg, effort)
	if p.centreNoise > 0 {
		p.calSpeed = math.Max(p.calSpeed, speed) // (a calibration's sweep)
	}
	from, err := p.toSweepStart(start, dir, speed)
	if err != nil {
		return dipFit{}, err
	}
	// The sweep stops once it has clearly passed the dip: judged on a running mean of n
	// readings where the noise is high, so that a noise spike is not taken for the dip.
	n, sd := noise.averaging(&t.par.scan)
	f := &fineWatch{k: k, start: float64(start), dir: dir, w: w, baseline: p.baseline, avg: newMean(n),
		deep: math.Max(k.deepShare, k.deepSigmas*sd/math.Sqrt(float64(n)))}
	if sense.SWRFromGamma2(1/(1+w*w))-1 > k.narrowStepSWR {
		// a dip so narrow that a fraction of a step in its centre decides the step
		f.sym = k.symmetricWidths * w
	}
	if p.centreNoise > 0 {
		// a calibration's sweep reads past the dip as far as its fit reaches (symmetricAround)
		f.sym = math.Max(f.sym, (t.par.play.fitWidths+calibrationOvershoot)*w)
	}
	if _, err := p.sweepRead("fine", from, start, end, speed, f); err != nil {
		return dipFit{}, err
	}
	if f.aMax < math.Max(k.minDepth, k.deepSigmas*sd/math.Sqrt(float64(n))) {
		// no dip, or none deeper than the noise can fake (a scan's false alarm)
		return dipFit{}, fmt.Errorf("%w: deepest reading |Γ|² %.2f", errNotInWindow, 1-f.aMax)
	}
	// The deepest point at either end of a sweep that did not reach the end of the travel:
	// the dip lies beyond.
	lim0, lim1 := ax.SoftLimits()
	edge := k.edgeWidths * w
	nearLo := f.posMax-lo < edge && lo > float64(lim0+t.runUp())+edge
	nearHi := hi-f.posMax < edge && hi < float64(lim1-t.runUp())-edge
	if nearLo || nearHi {
		toward := f.posMax - k.followWidths*w
		if nearHi {
			toward = f.posMax + k.followWidths*w
		}
		return dipFit{}, &edgeError{toward: toward, spacing: spacing}
	}
	fit, err := fitDip(&t.par.fit, f.samples, w, noise.rel)
	if err != nil {
		return dipFit{}, err
	}
	if p.centreNoise > 0 {
		if fit, f.samples, err = p.symmetricFit(fit, f.samples, w, noise); err != nil {
			return dipFit{}, err
		}
	}
	// (judged against the first sweep's spacing: a sweep repeated with more readings must not
	// be held to a tighter gap than the one it repeats)
	if side := uncovered(fit, f.samples); side != "" && fit.HalfWidth > w {
		return dipFit{}, &widerError{centre: fit.Centre, width: fit.HalfWidth, spacing: spacing, side: side}
	}
	if err := p.judge(fit, f.samples, w, spacing*float64(effort)); err != nil {
		var high *aboveTargetError
		var rough *roughError
		if dir == motion.Down && (errors.As(err, &high) || errors.As(err, &rough)) {
			// a downward sweep is kept only when it is clean: a bottom above the target or a
			// rough fit is swept again upward, as one above maxDownChi2 below
			return dipFit{}, fmt.Errorf("%w: %w", errDownDoubt, err)
		}
		return dipFit{}, err
	}
	if dir == motion.Down && fit.Chi2 > k.maxDownChi2 {
		return dipFit{}, fmt.Errorf("%w: %s fit sweeping down with χ² %.1f", errDownDoubt, fit.Method, fit.Chi2)
	}
	return fit, nil
}

// toSweepStart brings the motor to start with the gear play taken up in dir, where a sweep at
// speed begins: either by full-speed legs (a run-up leg past the start first where the motor
// does not already arrive that way), or, where that is quicker, by letting the sweep itself
// begin a run-up early, its readings before start dropped. It returns where the sweep begins.
func (p *op) toSweepStart(start motion.Steps, dir motion.Direction, speed float64) (motion.Steps, error) {
	st := p.t.d.Axis.Snapshot()
	legs := p.legsTo(st.Position, st.Play, start, dir)
	if len(legs) == 0 {
		return start, nil
	}
	legs = p.trimRunUp(st.Position, legs, start, dir, speed)
	from := start
	if len(legs) == 0 {
		from = st.Position
	} else if legs[len(legs)-1] != start {
		from = legs[len(legs)-1]
	}
	return from, p.travel("fine", legs, false, 0, nil)
}

// trimRunUp drops the last of the legs to a sweep's start (which runs in dir) where the sweep
// itself, beginning its run-up early at speed, gets there sooner than a full-speed leg and a
// start from rest.
func (p *op) trimRunUp(pos motion.Steps, legs []motion.Steps, start motion.Steps, dir motion.Direction, speed float64) []motion.Steps {
	if len(legs) == 0 {
		return legs
	}
	o := pos
	if len(legs) == 2 {
		o = legs[0]
	}
	slow := time.Duration(float64(time.Second) * float64((start-o)*motion.Steps(dir)) / speed)
	if slow < p.legsTime(o, legs[len(legs)-1:], false) {
		return legs[:len(legs)-1]
	}
	return legs
}

// fineWatch collects a fine sweep's readings and stops the sweep once it has clearly passed
// the dip and, on a narrow one, read as far past its deepest point as before it (up to sym).
type fineWatch struct {
	k        *sweepParams
	start    float64          // readings before it belong to the run-up
	dir      motion.Direction // of the sweep
	w        float64          // the dip's half-width
	baseline float64          // the coupler's off-dip |Γ|²
	avg      *runningMean
	deep     float64 // the least peak of the absorbed share that may stop the sweep
	sym      float64 // the most it reads past the deepest point to match the readings before it

	samples      []sample
	aMax, posMax float64 // the deepest mean so far, and where
}

// take implements sweepJudge.
func (f *fineWatch) take(s sample) verdict {
	if (s.Pos-f.start)*float64(f.dir) < 0 {
		return readAgain
	}
	f.samples = append(f.samples, s)
	m := f.avg.add(s)
	if !f.avg.full() {
		return readOn
	}
	a := f.baseline - m.Gamma2
	if a > f.aMax {
		f.aMax, f.posMax = a, m.Pos
	}
	// (and, on a narrow dip, symmetric: read as far past the deepest point as before it, up to
	// sym: a sweep that stops sooner leaves the fit more readings on
	// the near flank than on the far one, which pulls its centre toward the near side by a
	// fraction of a step, the step decided on a narrow dip)
	beyond := (m.Pos - f.posMax) * float64(f.dir)
	before := (f.posMax - f.start) * float64(f.dir)
	if f.aMax > f.deep && beyond > f.k.passedWidths*f.w && beyond >= math.Min(before, f.sym) &&
		a < f.k.passedShare*f.aMax {
		return stopNow
	}
	return readOn
}

// judge rejects a fit the tuner will not act on: a dip whose bottom reads an SWR above the
// target (the loop's resonance would not be tuned there anyway; such a fit was mis-sampled, by
// late readings on a loaded computer or by noise, or is not the resonance at all), a last-resort
// fit on too few readings, or a sweep too sparse for its dip. The width is judged by fitDip
// itself, against the expected one.
func (p *op) judge(f dipFit, samples []sample, w, spacing float64) error {
	k := &p.t.par.sweep
	if f.Chi2 > k.maxChi2 {
		return &roughError{fit: f}
	}
	if f.Method == "minimum" && f.N < k.minMinimum {
		return fmt.Errorf("%w: a minimum of %d reading(s)", errDoubtfulFit, f.N)
	}
	if gap := medianGap(samples); gap > k.maxGap*w {
		return fmt.Errorf("%w: readings %.1f steps apart on a dip %.1f steps wide", errDoubtfulFit, gap, w)
	}
	// the hole a late reading leaves at the centre, measured against the sweep's own plan: on
	// a narrow dip, swept densely, a hole of a fraction of w is already several readings missing
	// just where the centre is decided (never less than centreMinGap steps: readings are placed
	// to whole steps)
	// (a calibration's sweeps, far denser, are checked against each other instead: measurePlay)
	maxGap := k.maxCentreGap * math.Max(f.HalfWidth, w)
	if p.centreNoise == 0 {
		maxGap = math.Min(maxGap, math.Max(k.centreSpacings*spacing, k.centreMinGap))
	}
	if gap := centreGap(samples, f.Centre); gap > maxGap {
		return fmt.Errorf("%w: no reading within %.1f steps of the centre on a dip %.1f steps wide", errDoubtfulFit, gap/2, w)
	}
	// Judged last, so that the error says the fit is otherwise sound (refineAroundEffort).
	if swr := sense.SWRFromGamma2(math.Max(f.MinGamma2, 0)); !(swr <= p.t.o.TargetSWR) {
		return &aboveTargetError{fit: f, swr: swr, max: p.t.o.TargetSWR}
	}
	return nil
}

// uncovered says on which side of the fitted centre ("below", "above") the readings stop short
// of its half-width, if they do ("" if not): there the curve is extrapolated, not fitted.
func uncovered(f dipFit, samples []sample) string {
	if f.HalfWidth <= 0 || len(samples) == 0 {
		return ""
	}
	lo, hi := samples[0].Pos, samples[0].Pos
	for _, s := range samples {
		lo, hi = math.Min(lo, s.Pos), math.Max(hi, s.Pos)
	}
	switch {
	case f.Centre-lo < f.HalfWidth:
		return "below"
	case hi-f.Centre < f.HalfWidth:
		return "above"
	}
	return ""
}

// centreGap is the distance between the readings either side of c (infinite where c is not
// between two readings).
func centreGap(samples []sample, c float64) float64 {
	below, above := math.Inf(-1), math.Inf(1)
	for _, s := range samples {
		if s.Pos <= c {
			below = math.Max(below, s.Pos)
		} else {
			above = math.Min(above, s.Pos)
		}
	}
	return above - below
}

// medianGap is the median distance between consecutive samples.
func medianGap(samples []sample) float64 {
	if len(samples) < 2 {
		return math.Inf(1)
	}
	gaps := make([]float64, 0, len(samples)-1)
	for i := 1; i < len(samples); i++ {
		gaps = append(gaps, math.Abs(samples[i].Pos-samples[i-1].Pos))
	}
	sort.Float64s(gaps)
	return gaps[len(gaps)/2]
}
