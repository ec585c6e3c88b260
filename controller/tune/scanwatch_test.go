package tune

import (
	"math"
	"testing"

	"github.com/tankd/tankd/controller/motion"
)

// newTestScan is a scan watch moving up from 0 for a dip of half-width w, a reading every w/3
// steps (a coarse scan's density), each judged alone, the off-dip level seeded at 1.
func newTestScan(w, thr float64) (*op, *scanWatch) {
	p := &op{t: &Tuner{par: defaultParams()}, baseline: 1}
	k := &p.t.par.scan
	speed := w / 3 / p.readingTime().Seconds()
	s := &scanWatch{p: p, k: k, from: 0, dir: motion.Up, w: w, speed: speed, thr: thr,
		posMax: math.NaN(), lastAbove: math.Inf(-1), lastBase: math.Inf(1), last: math.NaN(),
		base: newMedian(k.baselineReadings, k.baselineWarmup, p.baseline), avg: newMean(1),
		spacing: spacingOf(speed, p)}
	return p, s
}

// scanTo feeds the watch readings of the level g(pos) from from to to, at its spacing, until it
// stops; it says whether it stopped.
func scanTo(s *scanWatch, from, to float64, g func(float64) float64) bool {
	for x := from; x <= to; x += s.spacing {
		if s.take(sample{Pos: x, Gamma2: g(x)}) == stopNow {
			return true
		}
	}
	return false
}

// dipAt is an off-dip level base with a Lorentzian dip absorbing depth at c, half-width w.
func dipAt(base, c, w, depth float64) func(float64) float64 {
	return func(x float64) float64 {
		u := (x - c) / w
		return base - depth/(1+u*u)
	}
}

// A lone spike deeper than the dip, far from it, is its own cluster: the dip's cluster must
// report its own peak, and must not be judged passed against the spike's depth (which stopped
// the scan on the dip's near flank and put the hit at the spike).
func TestScanSpikeDoesNotKeepItsPeak(t *testing.T) {
	const w, c = 10.0, 300.0
	_, s := newTestScan(w, 0.2)
	dip := dipAt(1, c, w, 0.5)
	g := func(x float64) float64 {
		if x >= 99 && x < 99+w/3 {
			return 0.25 // a spike: absorbed share 0.75, deeper than the dip's 0.5
		}
		return dip(x)
	}
	stopped := scanTo(s, 0, 500, g)
	hit, found, _ := s.end(stopped, 500)
	if !found {
		t.Fatal("no dip found")
	}
	if math.Abs(hit.pos-c) > w/2 {
		t.Fatalf("hit at %.1f, the dip is at %.0f (the spike at 100)", hit.pos, c)
	}
}

// A segment that stops on a dip has measured the off-dip level on its way there (the means in
// the dip left out): the fine sweep gets it, as it does from a segment that found nothing.
func TestScanStoppedOnDipKeepsBaseline(t *testing.T) {
	const w, c, off = 10.0, 300.0, 0.9 // a coupler whose leakage reads 0.9 off the dip
	p, s := newTestScan(w, 0.2)
	if !scanTo(s, 0, 500, dipAt(off, c, w, 0.6)) {
		t.Fatal("the scan did not stop past the dip")
	}
	if _, found, _ := s.end(true, 500); !found {
		t.Fatal("no dip found")
	}
	if math.Abs(p.baseline-off) > 0.02 {
		t.Fatalf("baseline %.3f after the segment, want the measured %.2f", p.baseline, off)
	}
}
