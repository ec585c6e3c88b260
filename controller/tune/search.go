package tune

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
)

// errNotInWindow: a fine sweep saw no dip, or only its edge; the caller scans wider.
var errNotInWindow = errors.New("dip not within the fine sweep")

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
	if err := p.approach("preposition", target); err != nil {
		return err
	}
	p.res.Prepositioned, p.res.PrePos = true, target
	t.emit(Event{Kind: KindPositioned, Pos: float64(target), Freq: p.res.Freq})
	return nil
}

// belowSweep goes below the fine sweep's start before the carrier goes on, when the map is sure
// enough for the search to begin with the fine sweep (that move needs no RF; the sweep takes up
// the play on its way up).
func (p *op) belowSweep(pred Prediction) error {
	u, ok := direct(pred)
	if !ok {
		return nil
	}
	_, _, start, _ := p.window(pred.Pos, u, pred.Width, motion.Up)
	lmin, _ := p.t.d.Axis.SoftLimits()
	return p.moveThrough("fine", max(start-p.t.runUp(), lmin))
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

// inRange refuses a frequency whose dip the prediction puts well outside the soft limits:
// there is nothing to tune there, and no reason to transmit. The physics prior knows that as
// well as a learned map, and either knows it whether or not the position is trusted.
func (p *op) inRange(pred Prediction) error {
	if pred.Source == SourceNone {
		return nil
	}
	lo, hi := p.t.d.Axis.SoftLimits()
	if pred.Pos+3*pred.Sigma < float64(lo) || pred.Pos-3*pred.Sigma > float64(hi) {
		return fmt.Errorf("%w: the dip is expected at %.0f±%.0f, outside the soft limits %d–%d",
			ErrOutOfRange, pred.Pos, pred.Sigma, lo, hi)
	}
	return nil
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

// target rounds a position and keeps it where an approach can take up the gear play within the
// soft limits.
func (p *op) target(pos float64) motion.Steps {
	lo, hi := p.t.d.Axis.SoftLimits()
	lo += p.t.runUp()
	return min(max(motion.Steps(math.Round(pos)), lo), hi)
}

// runUp is the travel that certainly takes up the gear play: the measured play once calibrated,
// else the nominal bound.
func (t *Tuner) runUp() motion.Steps {
	b := t.d.Axis.Snapshot().Backlash
	if !t.calibrated {
		b = max(b, t.o.NominalBacklash)
	}
	return b + 8
}

// clampPos keeps a position inside the soft limits.
func (p *op) clampPos(pos float64) float64 {
	lo, hi := p.t.d.Axis.SoftLimits()
	return math.Min(math.Max(pos, float64(lo)), float64(hi))
}

func (p *op) approach(stage string, target motion.Steps) error {
	t := p.t
	t.emit(Event{Kind: KindMove, Stage: stage, Pos: float64(t.d.Axis.Position()), Target: target, Freq: p.res.Freq})
	if err := t.d.Axis.Approach(p.ctx, target); err != nil {
		return err
	}
	return p.check()
}

func (p *op) moveThrough(stage string, target motion.Steps) error {
	t := p.t
	if t.d.Axis.Position() == target {
		return p.check()
	}
	t.emit(Event{Kind: KindMove, Stage: stage, Pos: float64(t.d.Axis.Position()), Target: target, Freq: p.res.Freq})
	if err := t.d.Axis.MoveThrough(p.ctx, target, 0); err != nil {
		return err
	}
	return p.check()
}

func (p *op) moveTo(stage string, target motion.Steps, speed float64) error {
	t := p.t
	t.emit(Event{Kind: KindMove, Stage: stage, Pos: float64(t.d.Axis.Position()), Target: target, Speed: speed, Freq: p.res.Freq})
	if err := t.d.Axis.MoveTo(p.ctx, target, speed); err != nil {
		return err
	}
	return p.check()
}

// search finds the dip around the prediction: straight to the fine sweep when the map is sure
// enough, otherwise a coarse scan first, widening the window up to the whole travel.
func (p *op) search(pred Prediction) (dipFit, error) {
	w := pred.Width
	noise, err := p.measureNoise()
	if err != nil {
		return dipFit{}, err
	}
	lo, hi := p.t.d.Axis.SoftLimits()
	centre, half := (float64(lo)+float64(hi))/2, (float64(hi)-float64(lo))/2
	if pred.Source != SourceNone && pred.Trusted {
		if u, ok := direct(pred); ok {
			f, err := p.refineAround(coarseHit{pos: pred.Pos, uncertainty: u}, w, noise)
			if err == nil {
				return f, nil
			}
			if !errors.Is(err, errNotInWindow) {
				return dipFit{}, err
			}
		}
		centre, half = pred.Pos, 3*pred.Sigma+3*w
	}
	for {
		c, err := p.coarse(centre, half, w, noise)
		if err != nil {
			return dipFit{}, err
		}
		f, err := p.refineAround(c, w, noise)
		if !errors.Is(err, errNotInWindow) || len(p.rejects) >= 5 {
			return f, err
		}
		// A false alarm: the fine sweep saw no dip there. Scan on, ignoring that spot (only
		// the spot: the fine sweep may have missed a real dip nearby by a backlash guess).
		u := 2 * w
		p.rejects = append(p.rejects, [2]float64{c.pos - u, c.pos + u})
		p.t.emit(Event{Kind: KindNote, Text: fmt.Sprintf("no dip near %.0f after all: scanning on", c.pos)})
	}
}

// refineAround runs the fine sweep around a coarse estimate, following the dip if the sweep
// shows it lies beyond.
// A fit that fails or is doubtful is swept again with twice and then four times the readings
// (more averaging): noise and late readings cost time, not correctness.
func (p *op) refineAround(c coarseHit, w float64, noise noiseLevel) (dipFit, error) {
	return p.refineAroundEffort(c, w, noise, 1)
}

func (p *op) refineAroundEffort(c coarseHit, w float64, noise noiseLevel, effort int) (dipFit, error) {
	u := c.uncertainty
	edges := 0
	for {
		f, err := p.refine(c.pos, u, w, noise, motion.Up, true, effort)
		if err == nil {
			return f, nil
		}
		var edge *edgeError
		switch {
		case errors.As(err, &edge) && edges < 2:
			edges++
			c.pos, u = edge.toward, 2*w+edge.spacing
		case errors.Is(err, errNoFit) && effort < 4:
			effort *= 2
			p.t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%v: sweeping again with %d× the readings", err, effort)})
		case errors.Is(err, errNoFit):
			return dipFit{}, fmt.Errorf("%w: %w", ErrNoDip, err)
		default:
			return dipFit{}, err
		}
	}
}

// edgeError: the fine sweep's deepest point lay at its end, so the dip is further on.
type edgeError struct {
	toward  float64
	spacing float64
}

func (e *edgeError) Error() string {
	return fmt.Sprintf("the dip lies beyond the sweep, near %.0f", e.toward)
}
func (e *edgeError) Unwrap() error { return errNotInWindow }

// averaging is how many readings a scan or sweep must average for a dip to stand clear of the
// noise off it (scanSigmas standard deviations within maxScanThreshold), and that noise.
func (n noiseLevel) averaging() (k int, sd float64) {
	sd = n.offDip()
	k = int(math.Ceil(math.Pow(scanSigmas*sd/maxScanThreshold, 2)))
	return min(max(k, 1), maxScanAveraging), sd
}

// offDip is the noise of one |Γ|² reading off the dip, where |Γ|² is near one: the absolute
// noise measured, or the relative noise of a log detector there, whichever is the larger (the
// noise may have been measured on the dip, where a log detector's absolute noise is small).
func (n noiseLevel) offDip() float64 { return math.Max(n.abs, n.rel) }

// noiseLevel is the measured reading noise.
type noiseLevel struct {
	rel   float64 // standard deviation of ln |Γ|²
	abs   float64 // standard deviation of |Γ|² itself where it was measured
	gamma float64 // the |Γ|² it was measured at
}

// flank is the noise to expect on the dip's flanks, where the fit gets its information: the
// relative noise of a log detector at |Γ|² about 0.3, or an absolute noise floor, whichever
// is the larger.
func (n noiseLevel) flank() float64 {
	if n.gamma > 0.3 {
		// measured off the dip, where both laws look alike: take the log detector's
		return 0.3 * n.rel
	}
	return math.Max(0.3*n.rel, n.abs)
}

func (p *op) measureNoise() (noiseLevel, error) {
	const n = 8
	var g []float64
	for range n {
		s, r, err := p.read("noise")
		if err != nil {
			return noiseLevel{}, err
		}
		if r.Forward >= p.t.o.MinForward {
			g = append(g, s.Gamma2)
		}
	}
	if len(g) < 3 {
		return noiseLevel{}, fmt.Errorf("%w while measuring the noise", ErrCarrierLost)
	}
	var nl noiseLevel
	var ml, m float64
	for _, v := range g {
		ml += math.Log(math.Max(v, 1e-6))
		m += v
	}
	ml /= float64(len(g))
	m /= float64(len(g))
	var vl, v2 float64
	for _, v := range g {
		d := math.Log(math.Max(v, 1e-6)) - ml
		vl += d * d
		v2 += (v - m) * (v - m)
	}
	k := float64(len(g) - 1)
	nl.rel, nl.abs, nl.gamma = math.Sqrt(vl/k), math.Sqrt(v2/k), m
	if m > 0.6 && p.baseline == 1 {
		p.baseline = m // most likely off the dip: the coupler's own off-dip reading
	}
	// six readings can come out alike by chance on a quantised converter: keep a floor
	nl.rel = math.Max(nl.rel, 0.002)
	nl.abs = math.Max(nl.abs, 2e-4)
	p.noise = nl
	p.t.emit(Event{Kind: KindNoise, Freq: p.res.Freq, Gamma2: m,
		Text: fmt.Sprintf("reading noise %.2f %% relative, %.4f absolute at |Γ|² %.3f", 100*nl.rel, nl.abs, m)})
	return nl, nil
}

// coarseHit is where the coarse scan saw the dip, in final-approach coordinates.
type coarseHit struct {
	pos         float64
	uncertainty float64
}

// coarse scans the window centre±half at a speed that puts ScanDensity readings within a dip
// half-width, stopping as soon as a dip has clearly been passed; if the window holds none it
// grows threefold, up to the whole travel, scanning only what it has not yet seen.
func (p *op) coarse(centre, half, w float64, noise noiseLevel) (coarseHit, error) {
	t := p.t
	if err := p.to(Scanning); err != nil {
		return coarseHit{}, err
	}
	spacing := math.Max(w/t.o.ScanDensity, 1)
	// A dip must stand clear of the noise: a rise in the absorbed share 1−|Γ|² of eight
	// standard deviations (off the dip the noise is the absolute noise at |Γ|² near one). Where
	// the noise is so high that a single reading could not show even a deep dip that clearly,
	// the scan slows down and averages k readings for every spacing it moves.
	k, sd := noise.averaging()
	thr := math.Max(0.12, scanSigmas*sd/math.Sqrt(float64(k)))
	speed := spacing / (float64(k) * p.readingTime().Seconds())
	if k > 1 {
		t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("noisy readings: scanning with %d readings averaged", k)})
	}
	amin, amax := p.t.d.Axis.SoftLimits()
	slo, shi := math.NaN(), math.NaN() // what has been scanned
	for {
		lo, hi := p.clampPos(centre-half), p.clampPos(centre+half)
		for _, seg := range p.segments(lo, hi, slo, shi) {
			hit, ok, err := p.scanSegment(seg[0], seg[1], w, speed, thr, k)
			if err != nil {
				return coarseHit{}, err
			}
			if ok {
				hit.uncertainty = spacing + 2 + p.backlashUncertainty()
				t.emit(Event{Kind: KindDip, Pos: hit.pos, Freq: p.res.Freq,
					Text: fmt.Sprintf("dip near %.0f", hit.pos)})
				return hit, nil
			}
		}
		if lo <= float64(amin) && hi >= float64(amax) {
			return coarseHit{}, fmt.Errorf("%w over the whole travel %d–%d", ErrNoDip, amin, amax)
		}
		if !math.IsNaN(slo) {
			lo, hi = math.Min(lo, slo), math.Max(hi, shi)
		}
		slo, shi = lo, hi
		half = 3*half + w
		p.res.Widened++
		t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("no dip yet: widening the scan to %.0f–%.0f",
			p.clampPos(centre-half), p.clampPos(centre+half))})
		if err := p.to(Scanning); err != nil {
			return coarseHit{}, err
		}
	}
}

// backlashEstimate is the play to convert a position found scanning downward to final-approach
// coordinates: the measured play, or half the nominal bound before a calibration.
func (p *op) backlashEstimate() float64 {
	if p.t.calibrated {
		return float64(p.t.d.Axis.Snapshot().Backlash)
	}
	return float64(p.t.o.NominalBacklash) / 2
}

// backlashUncertainty is how far a position found scanning downward may be off once converted
// to final-approach coordinates: half the nominal play until a calibration has measured it.
func (p *op) backlashUncertainty() float64 {
	if p.t.calibrated {
		return 2
	}
	return float64(p.t.o.NominalBacklash) / 2
}

// segments plans the scans that cover [lo, hi] minus the already scanned [slo, shi] (NaN when
// nothing is), starting at the end nearest the motor.
func (p *op) segments(lo, hi, slo, shi float64) [][2]float64 {
	pos := float64(p.t.d.Axis.Position())
	if math.IsNaN(slo) {
		switch {
		case pos <= lo:
			return [][2]float64{{lo, hi}}
		case pos >= hi:
			return [][2]float64{{hi, lo}}
		case pos-lo < hi-pos:
			return [][2]float64{{pos, lo}, {lo, hi}}
		default:
			return [][2]float64{{pos, hi}, {hi, lo}}
		}
	}
	var below, above [][2]float64
	if lo < slo {
		below = [][2]float64{{slo, lo}}
	}
	if hi > shi {
		above = [][2]float64{{shi, hi}}
	}
	if math.Abs(pos-slo) <= math.Abs(pos-shi) {
		return append(below, above...)
	}
	return append(above, below...)
}

// scanSegment moves to from and scans to to, watching for a dip.
func (p *op) scanSegment(from, to, w, speed, thr float64, k int) (coarseHit, bool, error) {
	t := p.t
	ax := t.d.Axis
	dir := motion.Up
	if to < from {
		dir = motion.Down
	}
	f, e := motion.Steps(math.Round(from)), motion.Steps(math.Round(to))
	// After a reversal the shaft stands still until the play is taken up: the scan starts a
	// run-up early and its readings before from are dropped.
	start := f
	if ax.Snapshot().Play != dir || ax.Position() != f {
		lo, hi := ax.SoftLimits()
		start = min(max(f-motion.Steps(dir)*t.runUp(), lo), hi)
	}
	if ax.Position() != start {
		if err := p.moveThrough("coarse", start); err != nil {
			return coarseHit{}, false, err
		}
	}
	t.emit(Event{Kind: KindMove, Stage: "coarse", Pos: float64(start), Target: e, Speed: speed, Freq: p.res.Freq})
	if err := ax.Start(e, speed); err != nil {
		return coarseHit{}, false, err
	}
	b := p.backlashEstimate()
	upEquiv := func(pos float64) float64 {
		if dir == motion.Down {
			return pos + b
		}
		return pos
	}
	// A dip is two readings or more above the threshold within a few half-widths of each
	// other: a single noise spike is not one.
	// Off the dip the coupler does not read |Γ|² = 1 exactly: its leakage adds to or takes
	// from the reflection. The absorbed share is measured from the running median of the
	// segment's readings, which the few readings in a dip do not move.
	aMax, posMax := 0.0, math.NaN()
	above, lastAbove := 0, math.Inf(-1)
	base := newMedian(32, p.baseline)
	avg := newMean(k)
	spacing := spacingOf(speed, p) * float64(k)
	lastBase := math.Inf(1)
	for {
		s, _, err := p.read("coarse")
		if err != nil {
			return coarseHit{}, false, err
		}
		if (s.Pos-from)*float64(dir) >= 0 && !p.rejected(upEquiv(s.Pos)) {
			if m := avg.add(s); avg.full() {
				// The off-dip level is the running median of one mean per reading spacing
				// travelled (so that it spans the same travel however often the converter
				// reads), leaving out means well inside a dip: a scan that starts on the dip
				// would take it for the baseline.
				if math.Abs(m.Pos-lastBase) >= spacing && m.Gamma2 > 0.5*base.value() {
					base.add(m.Gamma2)
					lastBase = m.Pos
				}
				a := base.value() - m.Gamma2
				if a >= thr {
					if math.Abs(m.Pos-lastAbove) > 4*w+spacingOf(speed, p) {
						above = 0
					}
					above++
					lastAbove = m.Pos
				}
				if a > aMax && (a < thr || above >= 1) {
					aMax, posMax = a, m.Pos
				}
				if above >= 2 && a < aMax/3 && math.Abs(m.Pos-posMax) > 2*w {
					if err := ax.StopMove(p.ctx); err != nil {
						return coarseHit{}, false, err
					}
					return coarseHit{pos: upEquiv(posMax)}, true, nil
				}
			}
		}
		if _, moving, _ := ax.Poll(); !moving {
			break
		}
	}
	if err := ax.Wait(p.ctx); err != nil {
		return coarseHit{}, false, err
	}
	if base.n > 8 {
		p.baseline = base.value()
	}
	if above >= 2 {
		return coarseHit{pos: upEquiv(posMax)}, true, nil
	}
	return coarseHit{}, false, nil
}

// Scan averaging: the most readings a coarse scan averages; the threshold an averaged reading
// must be able to clear (a tuned loop absorbs most of the power at its dip, so a rise of 0.45
// in the absorbed share is well inside every dip worth the name); and how many standard
// deviations of the averaged noise a rise must be to count (five: a false alarm in some 10⁶
// readings, and a false alarm only costs a fine sweep that finds nothing there).
const (
	maxScanAveraging = 16
	maxScanThreshold = 0.45
	scanSigmas       = 5
)

// runningMean averages the last k samples (positions and |Γ|²).
type runningMean struct {
	buf []sample
	n   int
}

func newMean(k int) *runningMean { return &runningMean{buf: make([]sample, k)} }

func (m *runningMean) add(s sample) sample {
	m.buf[m.n%len(m.buf)] = s
	m.n++
	var out sample
	k := min(m.n, len(m.buf))
	for _, v := range m.buf[:k] {
		out.Pos += v.Pos
		out.Gamma2 += v.Gamma2
	}
	out.Pos /= float64(k)
	out.Gamma2 /= float64(k)
	return out
}

func (m *runningMean) full() bool { return m.n >= len(m.buf) }

// median is a running median of the last few values, seeded with a first guess.
type median struct {
	buf  []float64
	n    int
	seed float64
	tmp  []float64
}

func newMedian(size int, seed float64) *median {
	return &median{buf: make([]float64, size), tmp: make([]float64, 0, size), seed: seed}
}

func (m *median) add(v float64) {
	m.buf[m.n%len(m.buf)] = v
	m.n++
}

func (m *median) value() float64 {
	k := min(m.n, len(m.buf))
	if k < 5 {
		return m.seed
	}
	m.tmp = append(m.tmp[:0], m.buf[:k]...)
	sort.Float64s(m.tmp)
	return m.tmp[k/2]
}

// spacingOf is the distance between readings on a move at speed.
func spacingOf(speed float64, p *op) float64 { return speed * p.readingTime().Seconds() }

// rejected says whether a coarse hit near pos was already swept finely and held no dip.
func (p *op) rejected(pos float64) bool {
	for _, r := range p.rejects {
		if pos >= r[0] && pos <= r[1] {
			return true
		}
	}
	return false
}

// window is the span a fine sweep covers around centre, and where it starts and ends.
func (p *op) window(centre, u, w float64, dir motion.Direction) (lo, hi float64, start, end motion.Steps) {
	lo = p.clampPos(centre - u - 2.2*w)
	hi = p.clampPos(centre + u + 2.2*w)
	if lmin, _ := p.t.d.Axis.SoftLimits(); lo < float64(lmin+p.t.runUp()) && dir == motion.Up {
		lo = float64(lmin + p.t.runUp())
	}
	start, end = motion.Steps(math.Floor(lo)), motion.Steps(math.Ceil(hi))
	if dir == motion.Down {
		start, end = end, start
	}
	return lo, hi, start, end
}

// direct says whether the prediction is good enough to go straight to the fine sweep, and
// with what uncertainty.
func direct(pred Prediction) (u float64, ok bool) {
	if pred.Source == SourceNone || !pred.Trusted {
		return 0, false
	}
	u = 3*pred.Sigma + 1
	return u, u <= 4*pred.Width
}

// refine sweeps slowly through [centre−u−2.5w, centre+u+2.5w] in direction dir, reading on the
// move, and fits the resonance. The sweep's speed is sized from the measured noise so that the
// fitted centre reaches Options.CentreNoise.
func (p *op) refine(centre, u, w float64, noise noiseLevel, dir motion.Direction, changeState bool, effort int) (dipFit, error) {
	t := p.t
	ax := t.d.Axis
	if changeState {
		if err := p.to(Refining); err != nil {
			return dipFit{}, err
		}
	}
	lo, hi, start, end := p.window(centre, u, w, dir)
	if dir == motion.Down {
		// take up the play downward: run past the start, then come back down to it
		_, lmax := ax.SoftLimits()
		over := min(start+t.runUp(), lmax)
		if ax.Position() < over {
			if err := p.moveTo("fine", over, 0); err != nil {
				return dipFit{}, err
			}
		}
		if err := p.moveTo("fine", start, 0); err != nil {
			return dipFit{}, err
		}
	}
	// Samples the fit needs within ±w of the centre for the centre's standard error to reach
	// CentreNoise: σ_c ≈ 1.5·w·σ/√N (measured on simulated sweeps; see fit tests).
	// A wide dip forgives more: an error δ costs an SWR of about 1 + 2δ/w, so the target
	// grows with the width beyond CentreNoise.
	sigma := noise.flank() / 0.3
	target := math.Max(t.o.CentreNoise, 0.008*w)
	nCore := math.Pow(1.5*w*sigma/target, 2)
	nCore = math.Min(math.Max(nCore, 10), 80) * float64(effort)
	spacing := math.Min(math.Max(2*w/nCore, 0.05), w/4)
	speed := math.Max(spacing/p.readingTime().Seconds(), 5)
	from := start
	if dir == motion.Up {
		st := ax.Snapshot()
		if st.Play != motion.Up || st.Position > start || st.Position < start-t.runUp() {
			// The play must be taken up before the sweep (and a motor far below it must get
			// there at full speed, not at the sweep's): either a fast run-up leg and a settled
			// start, or the sweep itself begins a run-up below and its first readings are
			// dropped, whichever is quicker.
			lmin, _ := ax.SoftLimits()
			pre := max(start-t.runUp(), lmin)
			leg, err := ax.Plan(start-pre, 0)
			if err != nil {
				return dipFit{}, err
			}
			if float64(start-pre)/speed < (leg.Duration() + ax.Settle()).Seconds() {
				if err := p.moveThrough("fine", pre); err != nil {
					return dipFit{}, err
				}
				from = pre
			} else if err := p.approach("fine", start); err != nil {
				return dipFit{}, err
			}
		}
	}
	t.emit(Event{Kind: KindMove, Stage: "fine", Pos: float64(from), Target: end, Speed: speed, Freq: p.res.Freq})
	if err := ax.Start(end, speed); err != nil {
		return dipFit{}, err
	}
	// The sweep stops once it has clearly passed the dip: judged on a running mean of k
	// readings where the noise is high, so that a noise spike is not taken for the dip.
	var samples []sample
	k, sd := noise.averaging()
	avg := newMean(k)
	deep := math.Max(0.3, 6*sd/math.Sqrt(float64(k)))
	aMax, posMax := 0.0, 0.0
	for {
		s, _, err := p.read("fine")
		if err != nil {
			return dipFit{}, err
		}
		if dir == motion.Up && s.Pos < float64(start) {
			continue // still taking up the play
		}
		samples = append(samples, s)
		if m := avg.add(s); avg.full() {
			a := p.baseline - m.Gamma2
			if a > aMax {
				aMax, posMax = a, m.Pos
			}
			beyond := (m.Pos - posMax) * float64(dir)
			if aMax > deep && beyond > 2*w && a < 0.2*aMax {
				if err := ax.StopMove(p.ctx); err != nil {
					return dipFit{}, err
				}
				break
			}
		}
		if _, moving, _ := ax.Poll(); !moving {
			break
		}
	}
	if err := ax.Wait(p.ctx); err != nil {
		return dipFit{}, err
	}
	if aMax < 0.2 {
		return dipFit{}, fmt.Errorf("%w: deepest reading |Γ|² %.2f", errNotInWindow, 1-aMax)
	}
	// The deepest point at either end of a sweep that did not reach the end of the travel:
	// the dip lies beyond.
	lim0, lim1 := ax.SoftLimits()
	nearLo := posMax-lo < w && lo > float64(lim0+t.runUp())+w
	nearHi := hi-posMax < w && hi < float64(lim1)-w
	if nearLo || nearHi {
		toward := posMax - 2*w
		if nearHi {
			toward = posMax + 2*w
		}
		return dipFit{}, &edgeError{toward: toward, spacing: spacing}
	}
	fit, err := fitDip(samples, w, noise.rel)
	if err != nil {
		return dipFit{}, err
	}
	if err := p.judge(fit, samples, w); err != nil {
		return dipFit{}, err
	}
	return fit, nil
}

// errDoubtfulFit: a fit the tuner will not act on, let alone learn from.
var errDoubtfulFit = fmt.Errorf("%w: doubtful", errNoFit)

// judge rejects a fit the tuner will not act on: a dip whose bottom reads an SWR above the
// target (the loop's resonance would not be tuned there anyway; such a fit was mis-sampled, by
// late readings on a loaded computer or by noise, or is not the resonance at all), a last-resort
// fit on fewer than three readings, or a sweep too sparse for its dip. The width is judged by
// fitDip itself, against the expected one.
func (p *op) judge(f dipFit, samples []sample, w float64) error {
	if swr := sense.SWRFromGamma2(math.Max(f.MinGamma2, 0)); !(swr <= p.t.o.TargetSWR) {
		return fmt.Errorf("%w: %s fit with SWR %.2f at its bottom, above the target %.2f", errDoubtfulFit, f.Method, swr, p.t.o.TargetSWR)
	}
	if f.Method == "minimum" && f.N < 3 {
		return fmt.Errorf("%w: a minimum of %d reading(s)", errDoubtfulFit, f.N)
	}
	if gap := medianGap(samples); gap > w/2 {
		return fmt.Errorf("%w: readings %.1f steps apart on a dip %.1f steps wide", errDoubtfulFit, gap, w)
	}
	return nil
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

// settle makes the final approach to the fitted centre and verifies it. The verified SWR must
// be within the target and as low as the fitted dip promised, within what the measured noise
// and a whole step's placement allow; otherwise the dip is swept again with twice the readings
// and verified with twice as many, and if it still fails the loop is reported not tuned.
func (p *op) settle(fit dipFit, pred Prediction) error {
	t := p.t
	for attempt := 0; ; attempt++ {
		if err := p.to(Approaching); err != nil {
			return err
		}
		target := p.target(fit.Centre)
		if err := p.approach("approach", target); err != nil {
			return err
		}
		if err := p.to(Verifying); err != nil {
			return err
		}
		n := 3 << attempt
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
		if attempt == 1 {
			return fmt.Errorf("%w: verified SWR %.2f, above %.2f (target %.2f, fitted dip %.2f)",
				ErrNotTuned, swr, limit, t.o.TargetSWR, p.res.Fit.MinSWR)
		}
		t.note(p.res, "verify SWR %.2f above the %.2f the fit allows: sweeping again, more slowly", swr, limit)
		noise, err := p.measureNoise()
		if err != nil {
			return err
		}
		f, err := p.refineAroundEffort(coarseHit{pos: fit.Centre, uncertainty: 2 + w}, w, noise, 2)
		if err != nil {
			return err
		}
		fit = f
	}
}

// verifyLimit is the highest mean |Γ|² of n verify readings that still agrees with the fit: its
// minimum, plus what a placement error of up to misplace steps costs on a dip of half-width w, plus four
// standard errors of the mean of n readings at that level (a log detector's noise is relative,
// with a floor), plus a small allowance for the fit's own error.
func (p *op) verifyLimit(fit dipFit, w float64, n int) float64 {
	const misplace = 0.75 // steps: rounding to a whole step, and the approach's repeatability
	g0 := math.Max(fit.MinGamma2, 0)
	place := (1 - g0) * math.Min(1, (misplace/w)*(misplace/w))
	sd := p.noise.rel*math.Max(g0, 0.02) + 2e-4
	return g0 + place + 4*sd/math.Sqrt(float64(n)) + 0.005
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

// learn teaches the map the tune just made, unless the dip turned up so far from the
// prediction that the position itself may have slipped: such a tune is held back until the
// next one shows which it was. Two surprises in a row with the same offset are lost steps: with
// a home switch the axis is marked for homing; a freely turning capacitor is re-referenced by
// that offset; a capacitor with hard stops and no home switch is never re-referenced by a search
// (a wrong map would walk the motor into a stop): its position is distrusted until the operator
// references it. Once the position has been confirmed (homed or referenced by hand) and the
// surprise still repeats, the map was wrong: the new points replace the ones they contradict.
func (p *op) learn(pred Prediction) {
	t := p.t
	r := p.res
	r.Pos = t.d.Axis.Position()
	temp, hasTemp := t.temperature()
	pt := memmap.Point{Freq: r.Freq, Pos: r.Pos, At: t.d.Clock.Now(), SWR: math.Max(r.SWR, 1)}
	if hasTemp {
		pt.Temp, pt.HasTemp = *temp, true
	}
	if r.Fit != nil {
		pt.Q = r.Fit.QLoaded
	}
	delta := float64(r.Pos) - pred.Pos
	learned := pred.Source == memmap.SourceMap || pred.Source == memmap.SourceAnchored
	far := learned && math.Abs(delta) > math.Max(t.o.SlipLimit*pred.Sigma, 4*pred.Width+4)
	prev, confirmed := t.surprise, t.confirmed
	t.surprise, t.confirmed = nil, false
	again := far && prev != nil && math.Abs(delta-prev.delta) <= 0.2*math.Abs(delta)+2*pred.Width+2
	switch {
	case again && confirmed:
		n := t.d.Map.Forget(func(q memmap.Point) bool { return sameBand(q.Freq, pt.Freq) || sameBand(q.Freq, prev.pt.Freq) })
		t.note(r, "dips turned up %.0f steps from the map again after the position was confirmed: the map was wrong here; %d contradicted point(s) replaced", delta, n)
		p.learnPoint(prev.pt)
		p.learnPoint(pt)
	case again:
		shift := motion.Steps(math.Round((delta + prev.delta) / 2))
		r.Shift = shift
		switch {
		case t.o.HasHome:
			t.d.Axis.Distrust(fmt.Sprintf("dips found %d steps from the map twice running", shift))
			t.surprise = &surprise{pt: pt, delta: delta}
			t.note(r, "dips turned up %d steps from the map twice running: lost steps, or a wrong map; homing before the next tune", shift)
		case t.o.HardStops:
			t.d.Axis.Distrust(fmt.Sprintf("dips found %d steps from the map twice running: reference the position by hand", shift))
			t.surprise = &surprise{pt: pt, delta: delta}
			t.note(r, "dips turned up %d steps from the map twice running: lost steps, or a wrong map; with hard stops and no home switch the operator must reference the position", shift)
		default:
			t.d.Axis.Reference(t.d.Axis.Position() - shift)
			t.note(r, "dips turned up %d steps from the map twice running: lost steps; position re-referenced by %d", shift, -shift)
			prev.pt.Pos -= shift
			pt.Pos -= shift
			p.learnPoint(prev.pt)
			p.learnPoint(pt)
		}
	case far:
		t.surprise = &surprise{pt: pt, delta: delta}
		t.note(r, "dip %.0f steps from the map's prediction (σ %.1f): held back until the next tune", delta, pred.Sigma)
	default:
		if prev != nil && !confirmed {
			// the surprise was the map's, locally: the position agrees with it again. (After a
			// homing or a hand reference the held-back point belongs to the old frame.)
			p.learnPoint(prev.pt)
		}
		p.learnPoint(pt)
	}
}

// sameBand says whether two frequencies are close enough for one to contradict the other's
// map point: within 10 % (a wide amateur band is about 7 % wide).
func sameBand(a, b physic.Frequency) bool {
	return math.Abs(float64(a)-float64(b)) <= 0.1*float64(b)
}

func (p *op) learnPoint(pt memmap.Point) {
	t := p.t
	if err := t.d.Map.Learn(pt); err != nil {
		if !errors.Is(err, memmap.ErrSuperseded) {
			t.log.Warn("memory map refused a point", "freq", pt.Freq, "pos", pt.Pos, "err", err)
		}
		return
	}
	p.res.Learned++
}

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
	c, err := p.coarse((float64(lo)+float64(hi))/2, (float64(hi)-float64(lo))/2, pred.Width, noise)
	if err != nil {
		return dipFit{}, err
	}
	fit, err := p.refineAround(c, pred.Width, noise)
	if err != nil {
		return dipFit{}, err
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
	for effort := 1; ; effort *= 2 {
		if pl, err = p.measurePlay(fit, effort); err == nil {
			break
		}
		if !errors.Is(err, errInconsistentPlay) && !errors.Is(err, errNotInWindow) && !errors.Is(err, errNoFit) {
			return "", fmt.Errorf("calibrate: %w", err)
		}
		if effort >= 2 {
			t.note(p.res, "backlash not measured (%v): keeping the nominal %d steps", err, t.o.NominalBacklash)
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

// errInconsistentPlay: the up and down sweeps do not give a play the gear can have.
var errInconsistentPlay = errors.New("no consistent play")

// play is one backlash measurement.
type play struct {
	b        motion.Steps
	up, down float64 // mean fitted centres
	spread   float64 // the worse spread of the up or the down centres
}

// measurePlay sweeps through the dip up and down twice each, with effort times the readings
// the noise asks for, and judges the result: the down-sweep dip must lie below the up-sweep's by
// a play within twice the nominal bound, with sweeps that repeat within a quarter of it.
func (p *op) measurePlay(fit dipFit, effort int) (play, error) {
	t := p.t
	noise, err := p.measureNoise()
	if err != nil {
		return play{}, err
	}
	w := math.Max(fit.HalfWidth, 0.5)
	u := p.backlashUncertainty() + 2
	var ups, downs []float64
	for range 2 {
		for _, dir := range []motion.Direction{motion.Up, motion.Down} {
			c := fit.Centre
			if dir == motion.Down {
				c -= float64(t.o.NominalBacklash) / 2
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
	bound := 2*float64(t.o.NominalBacklash) + 4*w + 4
	switch {
	case pl.b < 0:
		return pl, fmt.Errorf("%w: down-sweep dip %.1f above the up-sweep %.1f", errInconsistentPlay, pl.down, pl.up)
	case float64(pl.b) > bound:
		return pl, fmt.Errorf("%w: %d steps, beyond the %0.f the gear can have", errInconsistentPlay, pl.b, bound)
	case pl.spread > math.Max(2*w+2, 0.25*float64(pl.b)):
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
