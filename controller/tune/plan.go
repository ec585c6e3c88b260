package tune

import (
	"math"
	"time"

	"github.com/tankd/tankd/controller/motion"
)

// sweepPlan is a fine sweep about to be made: its direction, and the full-speed legs that bring
// the motor to its start with the gear play taken up that way.
type sweepPlan struct {
	dir   motion.Direction
	legs  []motion.Steps // to the start, or to where the sweep's own run-up begins
	runUp bool           // the sweep begins with its own run-up, where the legs end
	cost  time.Duration  // the legs and the final approach after the sweep, as planned
}

// planSweep chooses the fine sweep through the window around centre (final-approach
// coordinates, uncertainty u) for a motor at pos with its play taken up in direction play (0:
// unknown). Upward always works: the readings are in final-approach coordinates, and the final
// approach runs down past the dip and back up. Downward, once the play has been measured, lets
// the final approach follow in one leg: the sweep ends below the dip, and the leg up to it is
// longer than the play. Of the two, it takes the one whose legs and final approach take least
// time (the sweep itself is as long either way).
func (p *op) planSweep(centre, u, w float64, pos motion.Steps, play motion.Direction) sweepPlan {
	dirs := []motion.Direction{motion.Up}
	speed := p.expectedSweepSpeed(w)
	if p.playKnown(w, speed) {
		dirs = append(dirs, motion.Down)
	}
	target := p.target(centre)
	passed := p.t.par.sweep.passedWidths*w + p.stopDistance(speed)
	var best sweepPlan
	for i, dir := range dirs {
		off := p.playOffset(dir)
		lo, hi, start, _ := p.window(centre-off, u, w, dir)
		legs := p.legsTo(pos, play, start, dir)
		// where the sweep will have seen the dip pass and stopped, and the final approach begins
		stop := motion.Steps(math.Round(math.Min(math.Max(centre-off+float64(dir)*passed, lo), hi)))
		c := p.startTime(pos, legs, start, dir, speed) + p.legsTime(stop, p.legsTo(stop, dir, target, motion.Up), true)
		if i == 0 || c < best.cost {
			trimmed := p.trimRunUp(pos, legs, start, dir, speed)
			best = sweepPlan{dir: dir, legs: trimmed, runUp: len(trimmed) < len(legs), cost: c}
		}
	}
	return best
}

// playKnown says whether the play is known well enough to turn a dip of half-width w found
// sweeping down at speed into final-approach coordinates: its standard error within what the
// sweep's own centre is allowed (sweepParams.swrBudget), so that the two together stay within
// the budget; and measured by sweeps at least as fast. The play a calibration measures is the
// difference of two centres found sweeping up and down at its own speed, and includes whatever
// the drive train lags behind the count at that speed; a faster sweep down lags further, and
// that difference, not in the play, would misplace the dip by a step or more on a narrow one
// (seen on the bench's harsh ranges as tunes accepted a step or two off the dip).
func (p *op) playKnown(w, speed float64) bool {
	k := &p.t.par.sweep
	return p.t.calibrated && p.t.playSigma*math.Sqrt2 <= k.swrBudget*w/(2*k.centreSigmas) &&
		speed <= p.t.playSpeed
}

// scanPlan is where a coarse scan of a window begins and which way it runs first.
type scanPlan struct {
	dir  motion.Direction
	from motion.Steps
	legs []motion.Steps // to from, the play taken up in dir
}

// planScan chooses where the first scan of the window lo–hi (whole steps) begins, for a motor
// at pos (play: where its gear play is taken up) and a dip expected at pred.Pos ± pred.Sigma.
// From outside the window it scans across it from one end: the near end, or the far one where
// that saves more than the longer way there costs (a scan downward leaves the motor below the
// dip, where the upward fine sweep begins without running back past it). From inside, it scans
// first toward the side more likely to hold the dip.
func (p *op) planScan(lo, hi float64, pred Prediction, pos motion.Steps, play motion.Direction, speed float64) scanPlan {
	x := float64(pos)
	if x > lo && x < hi {
		dir := motion.Up
		if pred.Sigma > 0 && pred.Pos < x || pred.Sigma == 0 && hi-x > x-lo {
			dir = motion.Down
		}
		return scanPlan{dir: dir, from: pos}
	}
	w := pred.Width
	k := &p.t.par.scan
	var best scanPlan
	var bestCost time.Duration
	for i, dir := range []motion.Direction{motion.Up, motion.Down} {
		from := motion.Steps(math.Round(p.scanStart(lo, hi, pred, dir)))
		legs := p.legsTo(pos, play, from, dir)
		// the dip expected where predicted; the scan sees it pass passedWidths·w beyond and
		// stops a ramp's length further on
		dip := math.Min(math.Max(pred.Pos, lo), hi)
		seen := math.Abs(dip-float64(from)) + k.passedWidths*w
		stop := dip + float64(dir)*(k.passedWidths*w+p.stopDistance(speed))
		hit := coarseHit{pos: dip, uncertainty: p.hitUncertainty(w, dir)}
		at := motion.Steps(math.Round(p.clampPos(stop)))
		fine := p.planSweep(hit.pos, hit.uncertainty, w, at, dir)
		c := p.legsTime(pos, legs, true) + time.Duration(seen/speed*float64(time.Second)) + fine.cost +
			p.sweepTime(hit, w, fine.dir)
		if i == 0 || c < bestCost {
			best, bestCost = scanPlan{dir: dir, from: from, legs: legs}, c
		}
	}
	return best
}

// scanStart is where a scan of the window lo–hi for a dip expected at pred.Pos ± pred.Sigma
// begins, run in dir from outside the window: not at the window's end but
// scanParams.startSigmas σ (and the window's own margin of widths) short of the prediction, as
// most dips lie nearer. The motor gets there at full speed, far quicker than scanning the
// stretch; the rest of the window is scanned after, back from the start, where the dip was not
// found ahead (segments), so that the window is covered all the same.
func (p *op) scanStart(lo, hi float64, pred Prediction, dir motion.Direction) float64 {
	k := &p.t.par.scan
	if !(pred.Sigma > 0) {
		if dir == motion.Down {
			return hi
		}
		return lo
	}
	back := k.startSigmas*pred.Sigma + k.windowWidths*pred.Width
	return math.Min(math.Max(pred.Pos-float64(dir)*back, lo), hi)
}

// startTime is how long the legs to a sweep's start take from pos, the last of them (which runs
// in dir) either at full speed or as the sweep's own run-up at speed, whichever is quicker (as
// toSweepStart chooses).
func (p *op) startTime(pos motion.Steps, legs []motion.Steps, start motion.Steps, dir motion.Direction, speed float64) time.Duration {
	trimmed := p.trimRunUp(pos, legs, start, dir, speed)
	d := p.legsTime(pos, trimmed, false)
	if len(trimmed) < len(legs) {
		o := pos
		if len(trimmed) > 0 {
			o = trimmed[len(trimmed)-1]
		}
		d += time.Duration(float64(time.Second) * float64((start-o)*motion.Steps(dir)) / speed)
	}
	return d
}

// expectedSweepSpeed is the fine sweep's speed for a dip of half-width w at the noise last
// measured (the quietest the tuner assumes before any measurement).
func (p *op) expectedSweepSpeed(w float64) float64 {
	sigma := p.t.par.noise.relFloor
	if p.t.noise.df > 0 {
		sigma = math.Max(sigma, math.Sqrt(p.t.noise.vl))
	}
	speed, _ := p.sweepSpeed(w, sigma, 1)
	return speed
}

// stopDistance is how far the motor runs on when stopped at speed: v²/2a.
func (p *op) stopDistance(speed float64) float64 {
	pr, err := p.t.d.Axis.Plan(1, speed)
	if err != nil || !(pr.Accel > 0) {
		return 0
	}
	v := math.Min(speed, pr.MaxSpeed)
	return v * v / (2 * pr.Accel)
}

// sweepTime estimates how long the fine sweep around hit takes in direction dir, from its start
// to where it has seen the dip pass, at the speed the last measured noise asks for.
func (p *op) sweepTime(hit coarseHit, w float64, dir motion.Direction) time.Duration {
	k := &p.t.par.sweep
	speed := p.expectedSweepSpeed(w)
	n := hit.uncertainty + (k.marginWidths+k.passedWidths)*w
	return time.Duration(n / speed * float64(time.Second))
}
