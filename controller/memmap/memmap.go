package memmap

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

// Point is one good tune: where the dip was found, when, and how well it tuned.
type Point struct {
	Freq physic.Frequency
	Pos  motion.Steps
	// At is when the tune was made. The zero time means unknown (a point imported without a
	// time): such a point is taken to be old, and does not feed the drift estimate.
	At time.Time
	// Temp is the loop's temperature at the tune, if HasTemp.
	Temp    physic.Temperature
	HasTemp bool
	// SWR is the standing-wave ratio the tune reached; 0 if unknown.
	SWR float64
	// Q is the loaded Q fitted to the dip; 0 if unknown.
	Q float64
}

// maxPos bounds positions to what a float64 holds exactly.
const maxPos = 1 << 52

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func (p Point) validate() error {
	switch {
	case p.Freq <= 0:
		return fmt.Errorf("%w: frequency %v is not positive", ErrInvalidPoint, p.Freq)
	case p.Pos > maxPos || p.Pos < -maxPos:
		return fmt.Errorf("%w: position %d is beyond ±2^52 steps", ErrInvalidPoint, p.Pos)
	case p.HasTemp && p.Temp < 0:
		return fmt.Errorf("%w: temperature %d nK is below absolute zero", ErrInvalidPoint, int64(p.Temp))
	case !finite(p.SWR) || p.SWR != 0 && p.SWR < 1:
		return fmt.Errorf("%w: swr %g is neither 0 (unknown) nor a finite value ≥ 1", ErrInvalidPoint, p.SWR)
	case !finite(p.Q) || p.Q < 0:
		return fmt.Errorf("%w: q %g is not a finite value ≥ 0", ErrInvalidPoint, p.Q)
	}
	return nil
}

// normalized returns p as the map stores it: time in UTC without a monotonic reading, no
// temperature value unless HasTemp.
func (p Point) normalized() Point {
	if !p.At.IsZero() {
		p.At = p.At.Round(0).UTC()
	}
	if !p.HasTemp {
		p.Temp = 0
	}
	return p
}

// Prediction is where the dip is expected at a frequency.
type Prediction struct {
	// Pos is the expected position, in steps.
	Pos float64
	// Sigma is the 1-σ uncertainty of Pos, in steps: a search window of ±2σ holds the dip about
	// 95 % of the time.
	Sigma float64
	// Slope is dPos/dFreq at that frequency, in steps per hertz: negative for a capacitor whose
	// capacitance grows with position. It converts a dip's width in hertz to steps.
	Slope float64
	// Q is the loaded Q learned near that frequency, 0 if none is known.
	Q float64
	// Source says what the prediction rests on: SourceMap, SourcePrior or SourceAnchored.
	Source string
}

// The sources of a Prediction.
const (
	SourceMap      = "map"            // the learned points
	SourcePrior    = "prior"          // the prior alone: the map is empty
	SourceAnchored = "anchored-prior" // the prior, shifted to agree with the nearest learned point
	// SourceNone is for a caller that goes on without a prediction (Predict reported false):
	// the map itself never gives it.
	SourceNone = "none"
)

// Prior predicts the dip from a physics model of the loop, without any learned points. Its
// Sigma must be honest too: the map trusts it as given.
type Prior interface {
	Predict(f physic.Frequency) (Prediction, bool)
}

// Errors for errors.Is.
var (
	// ErrInvalidPoint: a point to learn or import has an impossible value.
	ErrInvalidPoint = errors.New("invalid point")
	// ErrSuperseded: a newer point near the same frequency is already known; the older one was
	// not learned.
	ErrSuperseded = errors.New("superseded by a newer point")
)

// entry is a learned point as the model sees it.
type entry struct {
	pt   Point
	fHz  float64
	u    float64 // (1 MHz / f)²
	x    float64 // u·(1+eps): where the point lies in the reference state
	yref float64 // Pos − off: its position in the reference state
	eps  float64 // the fractional slope change the point was placed with
	off  float64 // the offset it was placed with
	dT   float64 // the temperature difference to the reference it was taken to have
	p    mat     // the covariance of the error of its placement
	c    mat     // the covariance of the drift estimate's error now with that of its placement
	r    float64 // residual from the global model
	mult float64 // how many points' worth of information it shares with its neighbours
}

func (e *entry) place(eps, off float64) {
	e.eps, e.off = eps, off
	e.x = e.u * (1 + eps)
	e.yref = float64(e.pt.Pos) - off
}

func newEntry(p Point) entry {
	fHz := float64(p.Freq) / 1e6
	r := 1e6 / fHz
	return entry{pt: p, fHz: fHz, u: r * r}
}

// Map is the learned frequency-to-position memory. It is safe for concurrent use; Predict
// takes only a read lock and does not allocate.
type Map struct {
	mu   sync.RWMutex
	o    resolved
	ents []entry // sorted by x
	flt  filter
	fit  model
}

// New returns an empty map.
func New(opts Options) (*Map, error) {
	o, err := opts.resolve()
	if err != nil {
		return nil, err
	}
	return &Map{o: o}, nil
}

// Len returns the number of learned points.
func (m *Map) Len() int {
	m.mu.RLock()
	defer m.mu.RUnlock()
	return len(m.ents)
}

// Points returns a copy of the learned points, sorted by frequency.
func (m *Map) Points() []Point {
	m.mu.RLock()
	defer m.mu.RUnlock()
	pts := make([]Point, len(m.ents))
	for i := range m.ents {
		pts[i] = m.ents[i].pt
	}
	slices.SortFunc(pts, func(a, b Point) int { return cmpFreq(a.Freq, b.Freq) })
	return pts
}

func cmpFreq(a, b physic.Frequency) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// Drift is a snapshot of the drift estimate, for logs and metrics. All of it is relative to the
// map's reference state: the loop as it was at the first learned point.
type Drift struct {
	// At is the time of the latest tune that updated the estimate; zero if none has.
	At time.Time
	// Epsilon is the fractional change of the slope of position against 1/f² at the latest
	// known temperature, with its 1-σ uncertainty at At.
	Epsilon, EpsilonSigma float64
	// TempCoeff is the fitted temperature coefficient of Epsilon, per kelvin, with its 1-σ.
	TempCoeff, TempCoeffSigma float64
	// Offset is the fitted position offset, in steps, with its 1-σ.
	Offset, OffsetSigma float64
}

// Drift returns the current drift estimate.
func (m *Map) Drift() Drift {
	m.mu.RLock()
	defer m.mu.RUnlock()
	f := &m.flt
	dT := f.dT(0, false)
	h := vec{sEps: 1, sKappa: dT}
	return Drift{
		At:             f.at,
		Epsilon:        f.eps(dT),
		EpsilonSigma:   math.Sqrt(f.p.quad(h)),
		TempCoeff:      f.x[sKappa],
		TempCoeffSigma: math.Sqrt(f.p[sKappa][sKappa]),
		Offset:         f.x[sOff],
		OffsetSigma:    math.Sqrt(f.p[sOff][sOff]),
	}
}

// merges reports whether a point at b replaces one at a.
func (m *Map) merges(a, b physic.Frequency) bool {
	d := a - b
	if d < 0 {
		d = -d
	}
	if m.o.mergeWithin < 0 {
		return d == 0
	}
	return d <= m.o.mergeWithin
}

// Learn adds the result of a good tune. A point within MergeWithin of existing ones replaces
// them, unless one of them is newer: then nothing changes and the error wraps ErrSuperseded.
// Before the point goes in, the map's prediction for it is compared with where the dip really
// was, and the difference updates the drift estimate. Points should come in time order; one
// older than the latest learned tune is placed with the current drift estimate.
func (m *Map) Learn(p Point) error {
	if err := p.validate(); err != nil {
		return fmt.Errorf("memmap: learn %v: %w", p.Freq, err)
	}
	p = p.normalized()
	m.mu.Lock()
	defer m.mu.Unlock()
	var replace []int
	for i := range m.ents {
		old := &m.ents[i].pt
		if !m.merges(old.Freq, p.Freq) {
			continue
		}
		if old.At.After(p.At) {
			return fmt.Errorf("memmap: learn %v: %w (%v, learned %v)", p.Freq, ErrSuperseded,
				old.Freq, old.At.Format(time.RFC3339))
		}
		replace = append(replace, i)
	}

	c := 0.0
	if p.HasTemp {
		c = p.Temp.Celsius()
		if m.o.capKappa > 0 {
			m.flt.noteTemp(c)
		}
	}
	e := newEntry(p)
	e.dT = m.flt.dT(c, p.HasTemp && m.o.capKappa > 0)
	switch {
	case p.At.IsZero():
		// Of unknown age: as uncertain as the loop's whole wander, unrelated to today.
		w := m.o.wander(0)
		e.p = m.flt.p
		for i := range ns {
			e.p[i][i] += w[i][i]
		}
	case !m.flt.started:
		m.flt.start(p.At, &m.o)
		e.p, e.c = m.flt.p, m.flt.p
	case p.At.Before(m.flt.at):
		// A tune coming in late (an import) is placed with the current estimate, which has
		// moved on from its time by as much as the loop may have wandered in between.
		w := m.o.wander(math.Exp2(-hoursBetween(p.At, m.flt.at) / m.o.halfLife))
		e.p, e.c = m.flt.p, m.flt.p
		for i := range ns {
			e.p[i][i] += w[i][i]
		}
	default:
		a := m.flt.advance(p.At, &m.o)
		for i := range m.ents {
			m.ents[i].c = decayRows(a, &m.ents[i].c)
		}
		q := m.query(p.Freq, e.fHz, e.u, p.At, e.dT)
		if pr, ok := m.predict(&q); ok {
			m.absorb(&pr, &q, float64(p.Pos)-pr.Pos)
		}
		e.p, e.c = m.flt.p, m.flt.p
	}
	e.place(m.flt.eps(e.dT), m.flt.x[sOff])

	for _, i := range slices.Backward(replace) {
		m.ents = slices.Delete(m.ents, i, i+1)
	}
	at := m.around(e.x) + 1
	m.ents = slices.Insert(m.ents, at, e)
	if len(m.ents) > m.o.maxPoints {
		m.evict(at)
	}
	m.refit()
	return nil
}

// evict drops one point to make room, never the end points (they set the span) nor keep, the
// one just learned: the point whose neighbours are closest together, relative to where it is,
// carries the least the others do not.
func (m *Map) evict(keep int) {
	best, bestGap := -1, math.Inf(1)
	for i := 1; i < len(m.ents)-1; i++ {
		if i == keep {
			continue
		}
		gap := (m.ents[i+1].x - m.ents[i-1].x) / m.ents[i].x
		if gap < bestGap || gap == bestGap && m.ents[i].pt.At.Before(m.ents[best].pt.At) {
			best, bestGap = i, gap
		}
	}
	if best >= 0 {
		m.ents = slices.Delete(m.ents, best, best+1)
	}
}

// Forget removes every point for which match returns true, and returns how many went. Use it
// when positions learned in some span of frequency or time are known to be wrong; match must not
// call the map.
func (m *Map) Forget(match func(Point) bool) int {
	m.mu.Lock()
	defer m.mu.Unlock()
	n := len(m.ents)
	m.ents = slices.DeleteFunc(m.ents, func(e entry) bool { return match(e.pt) })
	if len(m.ents) == 0 {
		m.flt = filter{}
	}
	m.refit()
	return n - len(m.ents)
}

// Reset forgets every point and the drift estimate: the map is as new.
func (m *Map) Reset() {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.ents = nil
	m.flt = filter{}
	m.refit()
}

// Shift moves every learned position by d steps: after a re-reference showed that the position
// count was off by −d when the points were learned.
func (m *Map) Shift(d motion.Steps) {
	m.mu.Lock()
	defer m.mu.Unlock()
	for i := range m.ents {
		e := &m.ents[i]
		e.pt.Pos += d
		e.yref += float64(d)
	}
	m.refit()
}

// query is one prediction's inputs, with the drift state resolved.
type query struct {
	f      physic.Frequency
	fHz, u float64
	at     time.Time
	dT     float64
	a      float64 // decay of the drift estimate from the filter's time to at
	eps    float64
	off    float64
	p      mat // drift covariance at time at
}

func (m *Map) query(f physic.Frequency, fHz, u float64, at time.Time, dT float64) query {
	p, a := m.flt.propagated(at, &m.o)
	x := decay(a, m.flt.x)
	return query{f: f, fHz: fHz, u: u, at: at, dT: dT, a: a,
		eps: x[sEps] + x[sKappa]*dT, off: x[sOff], p: p}
}

// Predict returns where the dip is expected at f at time at (the zero time: the latest learned
// tune's), with the loop at temperature temp (nil: the latest known temperature). It reports
// false when there is nothing to predict from: no points and no prior, or a prior that does not
// cover f.
func (m *Map) Predict(f physic.Frequency, at time.Time, temp *physic.Temperature) (Prediction, bool) {
	if f <= 0 {
		return Prediction{}, false
	}
	m.mu.RLock()
	defer m.mu.RUnlock()
	if at.IsZero() {
		at = m.flt.at
	}
	c, has := 0.0, false
	if temp != nil && m.o.capKappa > 0 {
		c, has = temp.Celsius(), true
	}
	fHz := float64(f) / 1e6
	r := 1e6 / fHz
	q := m.query(f, fHz, r*r, at, m.flt.dT(c, has))
	pr, ok := m.predict(&q)
	return pr.Prediction, ok
}

// outcome is a prediction with what the drift filter needs of it: the position's sensitivity
// to ε (steps per unit of fractional slope change, u·dPos/du), the covariance of the drift
// estimate's error with the prediction's error, and the points the prediction's drift rests on
// with their weights.
type outcome struct {
	Prediction
	h    float64
	gain vec
	nb   [2]int // −1: none
	w    [2]float64
}

// absorb updates the drift estimate with a tune that landed r steps from the prediction pr
// for q, and carries every point's cross-covariance through the update.
//
// The prediction's drift error is Σ_j w_j·(H·e − H_j·e_j) over the points it rests on, so the
// update changes each point's cross-covariance C_k by −K·Cov(that error, e_k). The covariance
// of two placements is not kept; it is taken as what their common relation to the current
// estimate implies, Cov(e_j, e_k) ≈ C_jᵀ·P⁻¹·C_k (and P_k for j = k). That is exact for points
// learned together or one just now, and it keeps the error the placements share (the map's
// reference state is never observed, only changes from it) shared.
func (m *Map) absorb(pr *outcome, q *query, r float64) {
	pinv := pseudoInverse(&m.flt.p)
	s := pr.Sigma*pr.Sigma + m.o.posVar
	k, ok := m.flt.update(pr.gain, r, s)
	if !ok {
		return
	}
	hq := obs(pr.h, q.dT)
	// cj[n] = C_j·h_j for the points the prediction rests on, then P⁻¹ applied.
	var pc [2]vec
	for n, j := range pr.nb {
		if j >= 0 {
			ej := &m.ents[j]
			pc[n] = pinv.mul(ej.c.mul(obs(pr.h, ej.dT)))
		}
	}
	for i := range m.ents {
		ek := &m.ents[i]
		a := rowTimes(hq, &ek.c)
		var v vec // Cov(prediction's drift error, e_k), a row
		for n, j := range pr.nb {
			if j < 0 || pr.w[n] == 0 {
				continue
			}
			var b vec
			if j == i {
				b = rowTimes(obs(pr.h, ek.dT), &ek.p)
			} else {
				b = rowTimes(pc[n], &ek.c)
			}
			for c := range ns {
				v[c] += pr.w[n] * (a[c] - b[c])
			}
		}
		for a := range ns {
			for c := range ns {
				ek.c[a][c] -= k[a] * v[c]
			}
		}
	}
}

// predict returns the best prediction for q.
func (m *Map) predict(q *query) (outcome, bool) {
	n := len(m.ents)
	if n == 0 {
		if m.o.prior == nil {
			return outcome{}, false
		}
		p, ok := m.o.prior.Predict(q.f)
		if !ok || !finite(p.Pos) || !finite(p.Sigma) || !finite(p.Slope) {
			return outcome{}, false
		}
		p.Source = SourcePrior
		return outcome{Prediction: p, h: -q.fHz / 2 * p.Slope, nb: [2]int{-1, -1}}, true
	}
	near := m.nearest(q.u * (1 + q.eps))
	ap, aok := m.predictAnchored(q, near)
	if m.fit.k == 0 {
		return ap, aok
	}
	mp := m.predictMap(q)
	// Near learned points the two are much alike, and picking whichever claims the smaller σ
	// would pick the luckier error estimate; the prior takes over only where it is clearly
	// better, away from the points.
	if aok && ap.Sigma < anchoredPreference*mp.Sigma {
		return ap, true
	}
	return mp, true
}

// anchoredPreference is how much smaller the anchored prior's σ must be for it to be used
// instead of the map's.
const anchoredPreference = 0.7

// nearest returns the index of the entry nearest x; there must be one.
func (m *Map) nearest(x float64) int {
	l := m.around(x)
	switch {
	case l < 0:
		return 0
	case l+1 < len(m.ents) && m.ents[l+1].x-x < x-m.ents[l].x:
		return l + 1
	}
	return l
}

// around returns the index of the last entry with x ≤ xq, −1 if none.
func (m *Map) around(xq float64) int {
	lo, hi := 0, len(m.ents)
	for lo < hi {
		mid := int(uint(lo+hi) >> 1)
		if m.ents[mid].x > xq {
			hi = mid
		} else {
			lo = mid + 1
		}
	}
	return lo - 1
}

// predictAnchored predicts from the prior, shifted so that it agrees with entry j as the drift
// has moved it since.
func (m *Map) predictAnchored(q *query, j int) (outcome, bool) {
	if m.o.prior == nil {
		return outcome{}, false
	}
	pp, ok := m.o.prior.Predict(q.f)
	if !ok || !finite(pp.Pos) || !finite(pp.Sigma) || !finite(pp.Slope) {
		return outcome{}, false
	}
	e := &m.ents[j]
	pa, ok := m.o.prior.Predict(e.pt.Freq)
	if !ok || !finite(pa.Pos) || !finite(pa.Sigma) {
		return outcome{}, false
	}
	h := -q.fHz / 2 * pp.Slope
	pos := pp.Pos + (float64(e.pt.Pos) - pa.Pos) + h*(q.eps-e.eps) + (q.off - e.off)
	// The prior's errors at two frequencies are alike when the frequencies are close, so the
	// anchor cancels them there and not far away.
	dl := math.Log(q.fHz / e.fHz)
	rho := math.Exp(-dl * dl / m.o.priorReachSq2)
	vp := pp.Sigma*pp.Sigma + pa.Sigma*pa.Sigma - 2*rho*pp.Sigma*pa.Sigma
	dv, g := m.entryDrift(e, h, q)
	v := math.Max(vp, 0) + m.o.posVar + dv
	qv := pp.Q
	if e.pt.Q > 0 {
		qv = e.pt.Q
	}
	return outcome{
		Prediction: Prediction{Pos: pos, Sigma: math.Sqrt(v), Slope: pp.Slope, Q: qv, Source: SourceAnchored},
		h:          h,
		gain:       g,
		nb:         [2]int{j, -1},
		w:          [2]float64{1, 0},
	}, true
}

// slopeSpan is the step of the central difference that gives the map's slope, as a share of
// the residuals' correlation length: wide enough to average over the position noise of close
// points, narrow enough to see the capacitor's bends (the global model's own curvature is exact
// in a central difference).
const slopeSpan = 0.25

// predictMap predicts from the learned points; the fit must exist.
func (m *Map) predictMap(q *query) outcome {
	xq := q.u * (1 + q.eps)
	mean, v, nb := m.meanAt(xq)
	d := math.Min(slopeSpan*m.fit.reach, 0.25*xq)
	dpdx := (m.mean(xq+d) - m.mean(xq-d)) / (2 * d)
	dpdu := dpdx * (1 + q.eps)
	h := q.u * dpdu
	dv, g := m.driftVar(&nb, h, q)
	return outcome{
		Prediction: Prediction{
			Pos:    mean + q.off,
			Sigma:  math.Sqrt(v + dv),
			Slope:  dpdu * (-2 * q.u / q.fHz),
			Q:      m.qAt(&nb),
			Source: SourceMap,
		},
		h:    h,
		gain: g,
		nb:   [2]int{nb.l, nb.r},
		w:    [2]float64{nb.wl, nb.wr},
	}
}

// driftVar is the variance, in steps², that the drift adds to a prediction with sensitivity h,
// and the covariance of the drift estimate's error with it: near a point, from the drift since
// it was learned; far from any, the same for an average point.
func (m *Map) driftVar(nb *nbrs, h float64, q *query) (float64, vec) {
	hq := obs(h, q.dT)
	fq := decayT(q.a, hq)
	ph := q.p.mul(hq)
	wf := 1 - nb.wl - nb.wr
	far := q.p.quad(hq) + m.fit.pbar.quad(hq) - 2*m.fit.cbar.bilin(fq, hq)
	d := wf * math.Max(far, 0)
	var g vec
	fc := decay(q.a, m.fit.cbar.mul(hq))
	for i := range ns {
		g[i] = wf * (ph[i] - fc[i])
	}
	for _, k := range [2]struct {
		i int
		w float64
	}{{nb.l, nb.wl}, {nb.r, nb.wr}} {
		if k.i < 0 || k.w <= 0 {
			continue
		}
		dk, gk := m.entryDrift(&m.ents[k.i], h, q)
		d += k.w * dk
		for i := range ns {
			g[i] += k.w * gk[i]
		}
	}
	return math.Max(d, 0), g
}

// entryDrift is the variance of the drift's error, in steps², of a prediction with sensitivity
// h made from entry e alone (the estimate now against the one e was placed with), and the
// covariance of the estimate's error now with it.
func (m *Map) entryDrift(e *entry, h float64, q *query) (float64, vec) {
	hq := obs(h, q.dT)
	hk := obs(h, e.dT)
	// The cross-covariance is carried to the query's time through the decay, F·C.
	v := math.Max(q.p.quad(hq)+e.p.quad(hk)-2*e.c.bilin(decayT(q.a, hq), hk), 0)
	ph := q.p.mul(hq)
	fc := decay(q.a, e.c.mul(hk))
	var g vec
	for i := range ns {
		g[i] = ph[i] - fc[i]
	}
	return v, g
}

// qAt interpolates the learned Q among the neighbours that know one.
func (m *Map) qAt(nb *nbrs) float64 {
	var s, w float64
	if nb.l >= 0 && m.ents[nb.l].pt.Q > 0 {
		s += nb.wl * m.ents[nb.l].pt.Q
		w += nb.wl
	}
	if nb.r >= 0 && m.ents[nb.r].pt.Q > 0 {
		s += nb.wr * m.ents[nb.r].pt.Q
		w += nb.wr
	}
	if w <= 1e-9 {
		return 0
	}
	return s / w
}
