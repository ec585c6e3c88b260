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
// grows, up to the whole travel, scanning only what it has not yet seen. A motor inside the
// first window scans toward first before the rest (0: toward the nearer end).
func (p *op) coarse(centre, half, w float64, noise noiseLevel, first motion.Direction) (coarseHit, error) {
	t := p.t
	k := &t.par.scan
	if err := p.to(Scanning); err != nil {
		return coarseHit{}, err
	}
	// A dip must stand clear of the noise: a rise in the absorbed share 1−|Γ|² of several
	// standard deviations (off the dip the noise is the absolute noise at |Γ|² near one). Where
	// the noise is so high that a single reading could not show even a deep dip that clearly,
	// the scan slows down and averages n readings for every spacing it moves.
	n, sd := noise.averaging(k)
	thr := math.Max(k.minThreshold, k.sigmas*sd/math.Sqrt(float64(n)))
	speed := p.scanSpeed(w, n)
	if n > 1 {
		t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("noisy readings: scanning with %d readings averaged", n)})
	}
	amin, amax := p.t.d.Axis.SoftLimits()
	slo, shi := math.NaN(), math.NaN() // what has been scanned
	for {
		lo, hi := p.scanWindow(centre, half)
		segs := p.segments(lo, hi, slo, shi, w, first)
		for round := 0; len(segs) > 0; round++ {
			var holes [][2]float64
			for _, seg := range segs {
				hit, ok, gaps, err := p.scanSegment(seg[0], seg[1], w, speed, thr, n)
				if err != nil {
					return coarseHit{}, err
				}
				if ok {
					t.emit(Event{Kind: KindDip, Pos: hit.pos, Freq: p.res.Freq,
						Text: fmt.Sprintf("dip near %.0f", hit.pos)})
					return hit, nil
				}
				holes = append(holes, gaps...)
			}
			// Stretches the readings skipped (late readings on a busy computer) may hide the dip:
			// they are scanned again, before the window grows.
			segs = nil
			if round < k.holeRounds && len(holes) > 0 {
				segs = p.holeSegments(holes)
				t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("%d stretch(es) the readings skipped: scanning them again", len(holes))})
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
		lo, hi = p.scanWindow(centre, half)
		t.emit(Event{Kind: KindNote, Freq: p.res.Freq, Text: fmt.Sprintf("no dip yet: widening the scan to %.0f–%.0f", lo, hi)})
		if err := p.to(Scanning); err != nil {
			return coarseHit{}, err
		}
	}
}

// scanWindow is the span centre±half, in whole steps within the soft limits.
func (p *op) scanWindow(centre, half float64) (lo, hi float64) {
	return math.Floor(p.clampPos(centre - half)), math.Ceil(p.clampPos(centre + half))
}

// scanSpeed is the coarse scan's speed for a dip of half-width w: Options.ScanDensity readings
// (means of n readings) within a half-width.
func (p *op) scanSpeed(w float64, n int) float64 {
	spacing := math.Max(w/p.t.o.ScanDensity, p.t.par.scan.minSpacing)
	return spacing / (float64(n) * p.readingTime().Seconds())
}

// hitUncertainty is how far from the dip a coarse hit may lie, found on a scan for a dip of
// half-width w moving in dir: the scan's spacing, the placement of readings between polls, and,
// scanning down, the play's uncertainty.
func (p *op) hitUncertainty(w float64, dir motion.Direction) float64 {
	k := &p.t.par.scan
	u := math.Max(w/p.t.o.ScanDensity, k.minSpacing) + k.hitSlack
	if dir == motion.Down {
		u += p.backlashUncertainty()
	}
	return u
}

// holeSegments plans scans of the stretches a scan's readings skipped, each widened by a run-up
// either side (it may be scanned the other way, where the play moves the dip), nearest first.
func (p *op) holeSegments(holes [][2]float64) [][2]float64 {
	pos := float64(p.t.d.Axis.Position())
	r := float64(p.t.runUp())
	out := make([][2]float64, 0, len(holes))
	for _, h := range holes {
		a, b := p.clampPos(math.Min(h[0], h[1])-r), p.clampPos(math.Max(h[0], h[1])+r)
		if math.Abs(pos-b) < math.Abs(pos-a) {
			a, b = b, a
		}
		out = append(out, [2]float64{a, b})
	}
	sort.Slice(out, func(i, j int) bool { return math.Abs(pos-out[i][0]) < math.Abs(pos-out[j][0]) })
	return out
}

// segments plans the scans that cover [lo, hi] minus the already scanned [slo, shi] (NaN when
// nothing is). The first window is scanned from the motor: across from an end, or, from inside,
// toward first and then across the rest (toward the nearer end first where first is 0).
func (p *op) segments(lo, hi, slo, shi, w float64, first motion.Direction) [][2]float64 {
	pos := float64(p.t.d.Axis.Position())
	if math.IsNaN(slo) {
		switch {
		case pos <= lo:
			return [][2]float64{{lo, hi}}
		case pos >= hi:
			return [][2]float64{{hi, lo}}
		}
		// From inside, the rest of the window is scanned back from a little beyond where the
		// motor began (a dip there, only partly seen, is seen whole), not across the stretch
		// already scanned again: the motor gets there at full speed.
		back := p.t.par.scan.hitSpanWidths * w
		if first == motion.Down || first == 0 && pos-lo < hi-pos {
			return [][2]float64{{pos, lo}, {math.Max(pos-back, lo), hi}}
		}
		return [][2]float64{{pos, hi}, {math.Min(pos+back, hi), lo}}
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
// each point judged against the threshold thr. With no dip found it returns the stretches its
// readings skipped.
func (p *op) scanSegment(from, to, w, speed, thr float64, n int) (coarseHit, bool, [][2]float64, error) {
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
			return coarseHit{}, false, nil, err
		}
	}
	k := &t.par.scan
	s := &scanWatch{p: p, k: k, from: from, dir: dir, b: p.backlashEstimate(), w: w, speed: speed, thr: thr,
		posMax: math.NaN(), lastAbove: math.Inf(-1), lastBase: math.Inf(1), last: math.NaN(),
		base: newMedian(k.baselineReadings, k.baselineWarmup, p.baseline), avg: newMean(n),
		spacing: spacingOf(speed, p) * float64(n)}
	stopped, err := p.sweepRead("coarse", start, f, e, speed, s)
	if err != nil {
		return coarseHit{}, false, nil, err
	}
	hit, found, holes := s.end(stopped, float64(e))
	return hit, found, holes, nil
}

// end is a scan segment's outcome once its sweep has ended at e, stopped on a dip or not: the
// hit, if it found one, else the stretches its readings skipped. The off-dip level it measured is
// kept for the fine sweep either way (op.baseline): the means in the dip are left out of it, so
// that a segment that stopped on a dip measured it as well as one that did not.
func (s *scanWatch) end(stopped bool, e float64) (coarseHit, bool, [][2]float64) {
	p, k := s.p, s.k
	if s.base.n > k.baselineKeep {
		p.baseline = s.base.value()
	}
	if stopped || s.above >= k.hitReadings {
		return coarseHit{pos: s.upEquiv(s.posMax), uncertainty: p.hitUncertainty(s.w, s.dir)}, true, nil
	}
	if !math.IsNaN(s.last) && math.Abs(e-s.last) > s.hole() {
		s.holes = append(s.holes, [2]float64{s.last, e})
	}
	return coarseHit{}, false, s.holes
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

	last  float64      // where the latest reading past from was (NaN: none yet)
	holes [][2]float64 // stretches between readings wide enough to hide a dip
}

// take implements sweepJudge.
func (s *scanWatch) take(r sample) verdict {
	k := s.k
	// Readings before from belong to the run-up (and one that could not be placed at all is
	// not ahead of it either); a spot already swept finely is not scanned again.
	if !((r.Pos-s.from)*float64(s.dir) >= 0) {
		return readOn
	}
	prev := s.last
	if math.IsNaN(prev) {
		prev = s.from
	}
	if math.Abs(r.Pos-prev) > s.hole() {
		s.holes = append(s.holes, [2]float64{prev, r.Pos})
	}
	s.last = r.Pos
	if s.p.rejected(s.upEquiv(r.Pos)) {
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
			// A new cluster: the deepest mean of an earlier one (a lone spike) is not its
			// peak, nor what it must fall back from to have passed the dip.
			s.above, s.aMax, s.posMax = 0, 0, math.NaN()
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

// hole is the least distance between readings that leaves a stretch where a dip may hide.
func (s *scanWatch) hole() float64 {
	return math.Max(s.k.holeWidths*s.w, s.k.holeSpacings*spacingOf(s.speed, s.p))
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
