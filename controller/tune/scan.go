package tune

import (
	"fmt"
	"math"
	"sort"

	"github.com/tankd/tankd/controller/motion"
)

// coarseHit is where the coarse scan saw the dip, in final-approach coordinates.
type coarseHit struct {
	pos         float64
	uncertainty float64
}

// coarse scans the window centre±half at a speed that puts ScanDensity readings within a dip
// half-width, stopping as soon as a dip has clearly been passed; if the window holds none it
// grows, up to the whole travel, scanning only what it has not yet seen.
func (p *op) coarse(centre, half, w float64, noise noiseLevel) (coarseHit, error) {
	t := p.t
	k := &t.par.scan
	if err := p.to(Scanning); err != nil {
		return coarseHit{}, err
	}
	spacing := math.Max(w/t.o.ScanDensity, k.minSpacing)
	// A dip must stand clear of the noise: a rise in the absorbed share 1−|Γ|² of several
	// standard deviations (off the dip the noise is the absolute noise at |Γ|² near one). Where
	// the noise is so high that a single reading could not show even a deep dip that clearly,
	// the scan slows down and averages n readings for every spacing it moves.
	n, sd := noise.averaging(k)
	thr := math.Max(k.minThreshold, k.sigmas*sd/math.Sqrt(float64(n)))
	speed := spacing / (float64(n) * p.readingTime().Seconds())
	if n > 1 {
		t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("noisy readings: scanning with %d readings averaged", n)})
	}
	amin, amax := p.t.d.Axis.SoftLimits()
	slo, shi := math.NaN(), math.NaN() // what has been scanned
	for {
		lo, hi := p.clampPos(centre-half), p.clampPos(centre+half)
		for _, seg := range p.segments(lo, hi, slo, shi) {
			hit, ok, err := p.scanSegment(seg[0], seg[1], w, speed, thr, n)
			if err != nil {
				return coarseHit{}, err
			}
			if ok {
				hit.uncertainty = spacing + k.hitSlack + p.backlashUncertainty()
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
		half = k.growth*half + w
		p.res.Widened++
		t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("no dip yet: widening the scan to %.0f–%.0f",
			p.clampPos(centre-half), p.clampPos(centre+half))})
		if err := p.to(Scanning); err != nil {
			return coarseHit{}, err
		}
	}
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

// scanSegment moves to from and scans to to, watching for a dip; n readings are averaged for
// each point judged against the threshold thr.
func (p *op) scanSegment(from, to, w, speed, thr float64, n int) (coarseHit, bool, error) {
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
		if err := p.move("coarse", start, passMove); err != nil {
			return coarseHit{}, false, err
		}
	}
	k := &t.par.scan
	s := &scanWatch{p: p, k: k, from: from, dir: dir, b: p.backlashEstimate(), w: w, speed: speed, thr: thr,
		posMax: math.NaN(), lastAbove: math.Inf(-1), lastBase: math.Inf(1),
		base: newMedian(k.baselineReadings, k.baselineWarmup, p.baseline), avg: newMean(n),
		spacing: spacingOf(speed, p) * float64(n)}
	stopped, err := p.sweepRead("coarse", start, e, speed, s)
	if err != nil {
		return coarseHit{}, false, err
	}
	if stopped {
		return coarseHit{pos: s.upEquiv(s.posMax)}, true, nil
	}
	if s.base.n > k.baselineKeep {
		p.baseline = s.base.value()
	}
	if s.above >= k.hitReadings {
		return coarseHit{pos: s.upEquiv(s.posMax)}, true, nil
	}
	return coarseHit{}, false, nil
}

// scanWatch judges a coarse scan's readings. A dip is a few readings above the threshold within
// a few half-widths of each other: a single noise spike is not one. Off the dip the coupler
// does not read |Γ|² = 1 exactly: its leakage adds to or takes from the reflection. The
// absorbed share is measured from the running median of the segment's readings, which the few
// readings in a dip do not move.
type scanWatch struct {
	p   *op
	k   *scanParams
	avg *runningMean
	// base is the off-dip level: the running median of one mean per reading spacing travelled
	// (so that it spans the same travel however often the converter reads).
	base *median

	from    float64          // readings before it belong to the run-up
	dir     motion.Direction // of the scan
	b       float64          // backlash, to convert positions found moving down
	w       float64          // the dip's half-width
	speed   float64
	thr     float64 // least rise in the absorbed share that counts
	spacing float64 // between the means that feed base

	aMax, posMax float64 // the deepest mean so far, and where
	above        int     // means above the threshold, close together
	lastAbove    float64 // where the last of them was
	lastBase     float64 // where base was last fed
}

// take implements sweepJudge.
func (s *scanWatch) take(r sample) verdict {
	k := s.k
	// Readings before from belong to the run-up (and one that could not be placed at all is
	// not ahead of it either); a spot already swept finely is not scanned again.
	if !((r.Pos-s.from)*float64(s.dir) >= 0) || s.p.rejected(s.upEquiv(r.Pos)) {
		return readOn
	}
	m := s.avg.add(r)
	if !s.avg.full() {
		return readOn
	}
	// Means well inside a dip are left out of the off-dip level: a scan that starts on the
	// dip would take it for the baseline.
	if math.Abs(m.Pos-s.lastBase) >= s.spacing && m.Gamma2 > k.inDipShare*s.base.value() {
		s.base.add(m.Gamma2)
		s.lastBase = m.Pos
	}
	a := s.base.value() - m.Gamma2
	if a >= s.thr {
		if math.Abs(m.Pos-s.lastAbove) > k.hitSpanWidths*s.w+spacingOf(s.speed, s.p) {
			s.above = 0
		}
		s.above++
		s.lastAbove = m.Pos
	}
	if a > s.aMax && (a < s.thr || s.above >= 1) {
		s.aMax, s.posMax = a, m.Pos
	}
	if s.above >= k.hitReadings && a < s.aMax/k.passedFactor && math.Abs(m.Pos-s.posMax) > k.passedWidths*s.w {
		return stopNow
	}
	return readOn
}

// upEquiv converts a position read on the scan to final-approach coordinates.
func (s *scanWatch) upEquiv(pos float64) float64 {
	if s.dir == motion.Down {
		return pos + s.b
	}
	return pos
}

// rejected says whether a coarse hit near pos was already swept finely and held no dip.
func (p *op) rejected(pos float64) bool {
	for _, r := range p.rejects {
		if pos >= r[0] && pos <= r[1] {
			return true
		}
	}
	return false
}

// spacingOf is the distance between readings on a move at speed.
func spacingOf(speed float64, p *op) float64 { return speed * p.readingTime().Seconds() }

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

// median is a running median of the last few values, seeded with a first guess until it has
// warmup of them.
type median struct {
	buf    []float64
	n      int
	warmup int
	seed   float64
	tmp    []float64
}

func newMedian(size, warmup int, seed float64) *median {
	return &median{buf: make([]float64, size), tmp: make([]float64, 0, size), warmup: warmup, seed: seed}
}

func (m *median) add(v float64) {
	m.buf[m.n%len(m.buf)] = v
	m.n++
}

func (m *median) value() float64 {
	k := min(m.n, len(m.buf))
	if k < m.warmup {
		return m.seed
	}
	m.tmp = append(m.tmp[:0], m.buf[:k]...)
	sort.Float64s(m.tmp)
	return m.tmp[k/2]
}
