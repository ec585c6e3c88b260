package tune

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
)

// errNotInWindow: a fine sweep saw no dip, or only its edge; the caller scans wider.
var errNotInWindow = errors.New("dip not within the fine sweep")

// errDoubtfulFit: a fit the tuner will not act on, let alone learn from.
var errDoubtfulFit = fmt.Errorf("%w: doubtful", errNoFit)

// edgeError: the fine sweep's deepest point lay at its end, so the dip is further on.
type edgeError struct {
	toward  float64
	spacing float64
}

func (e *edgeError) Error() string {
	return fmt.Sprintf("the dip lies beyond the sweep, near %.0f", e.toward)
}
func (e *edgeError) Unwrap() error { return errNotInWindow }

// refineAround runs the fine sweep around a coarse estimate, following the dip if the sweep
// shows it lies beyond.
// A fit that fails or is doubtful is swept again with more readings (more averaging), up to
// sweepParams.maxEffort times the first: noise and late readings cost time, not correctness.
func (p *op) refineAround(c coarseHit, w float64, noise noiseLevel) (dipFit, error) {
	return p.refineAroundEffort(c, w, noise, 1)
}

func (p *op) refineAroundEffort(c coarseHit, w float64, noise noiseLevel, effort int) (dipFit, error) {
	k := &p.t.par.sweep
	u := c.uncertainty
	edges := 0
	for {
		f, err := p.refine(c.pos, u, w, noise, motion.Up, true, effort)
		if err == nil {
			return f, nil
		}
		var edge *edgeError
		switch {
		case errors.As(err, &edge) && edges < k.maxFollows:
			edges++
			c.pos, u = edge.toward, k.uncertainWidths*w+edge.spacing
		case errors.Is(err, errNoFit) && effort < k.maxEffort:
			effort *= k.retryGrowth
			p.t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%v: sweeping again with %d× the readings", err, effort)})
		case errors.Is(err, errNoFit):
			return dipFit{}, fmt.Errorf("%w: %w", ErrNoDip, err)
		default:
			return dipFit{}, err
		}
	}
}

// window is the span a fine sweep covers around centre, and where it starts and ends.
func (p *op) window(centre, u, w float64, dir motion.Direction) (lo, hi float64, start, end motion.Steps) {
	m := p.t.par.sweep.marginWidths
	lo = p.clampPos(centre - u - m*w)
	hi = p.clampPos(centre + u + m*w)
	if lmin, _ := p.t.d.Axis.SoftLimits(); lo < float64(lmin+p.t.runUp()) && dir == motion.Up {
		lo = float64(lmin + p.t.runUp())
	}
	start, end = motion.Steps(math.Floor(lo)), motion.Steps(math.Ceil(hi))
	if dir == motion.Down {
		start, end = end, start
	}
	return lo, hi, start, end
}

// refine sweeps slowly through the window around centre (its uncertainty u and a margin of
// sweepParams.marginWidths dip half-widths beyond) in direction dir, reading on the move, and
// fits the resonance. The sweep's speed is sized from the measured noise so that the fitted
// centre reaches Options.CentreNoise.
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
	if dir == motion.Down {
		// take up the play downward: run past the start, then come back down to it
		_, lmax := ax.SoftLimits()
		over := min(start+t.runUp(), lmax)
		if ax.Position() < over {
			if err := p.move("fine", over, settleMove); err != nil {
				return dipFit{}, err
			}
		}
		if err := p.move("fine", start, settleMove); err != nil {
			return dipFit{}, err
		}
	}
	// Samples the fit needs within ±w of the centre for the centre's standard error to reach
	// its target: σ_c ≈ centreFactor·w·σ/√N, σ the relative noise on the flanks. A wide dip
	// forgives more: an error δ costs an SWR of about 1 + 2δ/w, so the target grows with the
	// width beyond CentreNoise.
	fg := t.par.noise.flankGamma2
	sigma := noise.flank(fg) / fg
	target := math.Max(t.o.CentreNoise, k.widthCentreNoise*w)
	nCore := math.Pow(k.centreFactor*w*sigma/target, 2)
	nCore = math.Min(math.Max(nCore, k.minCore), k.maxCore) * float64(effort)
	spacing := math.Min(math.Max(2*w/nCore, k.minSpacing), k.maxSpacing*w)
	speed := math.Max(spacing/p.readingTime().Seconds(), k.minSpeed)
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
				if err := p.move("fine", pre, passMove); err != nil {
					return dipFit{}, err
				}
				from = pre
			} else if err := p.move("fine", start, approachMove); err != nil {
				return dipFit{}, err
			}
		}
	}
	// The sweep stops once it has clearly passed the dip: judged on a running mean of n
	// readings where the noise is high, so that a noise spike is not taken for the dip.
	n, sd := noise.averaging(&t.par.scan)
	f := &fineWatch{k: k, start: float64(start), dir: dir, w: w, baseline: p.baseline, avg: newMean(n),
		deep: math.Max(k.deepShare, k.deepSigmas*sd/math.Sqrt(float64(n)))}
	if _, err := p.sweepRead("fine", from, end, speed, f); err != nil {
		return dipFit{}, err
	}
	if f.aMax < k.minDepth {
		return dipFit{}, fmt.Errorf("%w: deepest reading |Γ|² %.2f", errNotInWindow, 1-f.aMax)
	}
	// The deepest point at either end of a sweep that did not reach the end of the travel:
	// the dip lies beyond.
	lim0, lim1 := ax.SoftLimits()
	edge := k.edgeWidths * w
	nearLo := f.posMax-lo < edge && lo > float64(lim0+t.runUp())+edge
	nearHi := hi-f.posMax < edge && hi < float64(lim1)-edge
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
	if err := p.judge(fit, f.samples, w); err != nil {
		return dipFit{}, err
	}
	return fit, nil
}

// fineWatch collects a fine sweep's readings and stops the sweep once it has clearly passed
// the dip.
type fineWatch struct {
	k        *sweepParams
	start    float64          // readings below it, sweeping up, belong to the run-up
	dir      motion.Direction // of the sweep
	w        float64          // the dip's half-width
	baseline float64          // the coupler's off-dip |Γ|²
	avg      *runningMean
	deep     float64 // the least peak of the absorbed share that may stop the sweep

	samples      []sample
	aMax, posMax float64 // the deepest mean so far, and where
}

// take implements sweepJudge.
func (f *fineWatch) take(s sample) verdict {
	if f.dir == motion.Up && s.Pos < f.start {
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
	beyond := (m.Pos - f.posMax) * float64(f.dir)
	if f.aMax > f.deep && beyond > f.k.passedWidths*f.w && a < f.k.passedShare*f.aMax {
		return stopNow
	}
	return readOn
}

// judge rejects a fit the tuner will not act on: a dip whose bottom reads an SWR above the
// target (the loop's resonance would not be tuned there anyway; such a fit was mis-sampled, by
// late readings on a loaded computer or by noise, or is not the resonance at all), a last-resort
// fit on too few readings, or a sweep too sparse for its dip. The width is judged by fitDip
// itself, against the expected one.
func (p *op) judge(f dipFit, samples []sample, w float64) error {
	k := &p.t.par.sweep
	if swr := sense.SWRFromGamma2(math.Max(f.MinGamma2, 0)); !(swr <= p.t.o.TargetSWR) {
		return fmt.Errorf("%w: %s fit with SWR %.2f at its bottom, above the target %.2f", errDoubtfulFit, f.Method, swr, p.t.o.TargetSWR)
	}
	if f.Method == "minimum" && f.N < k.minMinimum {
		return fmt.Errorf("%w: a minimum of %d reading(s)", errDoubtfulFit, f.N)
	}
	if gap := medianGap(samples); gap > k.maxGap*w {
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
