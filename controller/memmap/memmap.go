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
	// 95 % of the time, ±3σ nearly always. It is calibrated by the map's record of its errors
	// (see "An honest σ" in the package documentation), and errs on the wide side while that
	// record is short.
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
// Sigma must be honest too: the map starts from it, and scales it as the prior's errors at the
// learned points show.
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
	cal  calib
}

// posVar is the variance of a learned position, steps², as the map's errors have shown it.
func (m *Map) posVar() float64 { return m.cal.scale(cNoise) * m.o.posVar }

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
		if len(m.ents) == 0 && m.o.prior != nil {
			// the bare prior's error at the first tune is the only measure of it there is
			q := m.query(p.Freq, e.fHz, e.u, p.At, e.dT)
			if pr, ok := m.predict(&q); ok {
				m.score(&pr, float64(p.Pos), nil)
			}
		}
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
		m.cal.fade(a)
		q := m.query(p.Freq, e.fHz, e.u, p.At, e.dT)
		if pr, ok := m.predict(&q); ok {
			m.score(&pr, float64(p.Pos), &q)
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
// call the map. The record of the map's errors stays: it is about the loop, not those points.
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

// Reset forgets every point, the drift estimate and the record of the map's errors: the map is
// as new.
func (m *Map) Reset() {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.ents = nil
	m.flt = filter{}
	m.cal = calib{}
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
// with their weights; and, for calib, Sigma² split by the source of the error.
//
// Sigma is calibrated: each source's variance is scaled by what the map's errors have shown
// (calib). The drift filter runs on the options' own model of the wander, whose covariances it
// has carried through every tune and cannot rescale after the fact; vf is the variance of the
// prediction in that model, the one its updates must use.
type outcome struct {
	Prediction
	h     float64
	gain  vec
	nb    [2]int // −1: none
	w     [2]float64
	parts [nComp]float64
	vf    float64
}

// far is how far from the learned points pr was made, from 0 (at a point) to 1 (beyond the
// reach of every point), as 1 less the weights a noiseless interpolation gives its neighbours.
//
// It is how much the error of pr says of Bend, the law's spread from the global model, which
// the map scales by its errors (calib): beside a point, the law's share of σ is what the guessed
// Reach leaves unknown over a short distance, and an error there tests how smooth the law is
// over that distance, not how far it bends between bands; a tabulated capacitor can be smooth
// over the first and bend by all of Bend over the second.
func (pr *outcome) far() float64 {
	return math.Min(math.Max(1-pr.w[0]-pr.w[1], 0), 1)
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
	k, ok := m.flt.update(pr.gain, r, pr.vf+m.posVar())
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

// predict returns the best prediction for q: the map's own where it has a fit, or the prior
// anchored to the nearest learned point, whichever has been right.
//
// Each has a σ, calibrated by the map's record of its errors (calib), and the one with the
// clearly smaller σ is the one that knows more. Within the reach of the learned points (the distance
// over which the map takes their local deviations to carry), each σ is first judged by how
// well that predictor does at the one or two points nearest the query, each predicted from the
// others (leave-one-out): the extrapolation a query beyond a band's last learned point asks
// for, at the scale of the points' own spacing. A predictor whose errors there were a tenth of
// its σ is taken to be ten times as good as its σ says, here too.
func (m *Map) predict(q *query) (outcome, bool) {
	n := len(m.ents)
	if n == 0 {
		return m.predictPrior(q)
	}
	xq := q.u * (1 + q.eps)
	near := m.nearest(xq)
	ap, aok := m.predictAnchored(q, near)
	if m.fit.k == 0 {
		return ap, aok
	}
	mp := m.predictMap(q)
	if !aok {
		return mp, true
	}
	zm, za := 1.0, 1.0
	if a, b, ok := m.record(xq, near); ok {
		zm, za = math.Max(a, recordFloor), math.Max(b, recordFloor)
	}
	if za*ap.Sigma < anchoredPreference*zm*mp.Sigma {
		return ap, true
	}
	return mp, true
}

// anchoredPreference is how much smaller the anchored prior's σ, so judged, must be for it to be
// used instead of the map's. At and near the learned points the two predict alike, and picking
// whichever claims the smaller σ would pick the luckier error estimate; the prior takes over
// only where it is clearly better.
const anchoredPreference = 0.7

// recordFloor is the least error, in its own σ, that a predictor's record near the query is
// taken at: a record better than a tenth of σ (√calibFloor, for the same reason) says no more,
// and two such records leave the choice to the σ.
const recordFloor = 0.1

// record returns the root-mean-square errors, in their own σ, with which the map's fit and the
// anchored prior predict the learned point j nearest xq and the next one beyond it from xq,
// each from the other points; ok is false if xq is beyond the reach of j or there is nothing to
// compare.
func (m *Map) record(xq float64, j int) (zmap, zanch float64, ok bool) {
	if math.Abs(xq-m.ents[j].x) > m.fit.reach {
		return 0, 0, false
	}
	var sm, sa float64
	k := 0
	for _, i := range [2]int{j, j + m.away(xq, j)} {
		if i < 0 || i >= len(m.ents) {
			continue
		}
		a, b, good := m.leaveOut(i)
		if !good {
			continue
		}
		sm += a * a
		sa += b * b
		k++
	}
	if k == 0 {
		return 0, 0, false
	}
	return math.Sqrt(sm / float64(k)), math.Sqrt(sa / float64(k)), true
}

// away is the step from entry j away from xq: +1 if xq lies below it, −1 if above.
func (m *Map) away(xq float64, j int) int {
	if xq < m.ents[j].x {
		return 1
	}
	return -1
}

// leaveOut returns the errors, each in its own σ, with which the map's fit and the prior
// anchored to the nearest other point predict entry i without it; good is false if either
// cannot.
//
// The fit's is exact for its global model (the residual over 1 − the point's leverage, the
// standard leave-one-out identity of least squares), with the local deviation interpolated from
// the point's neighbours alone. Both compare positions in the state each point was placed in,
// so the drift since does not enter; their σ are the map's, calibrated as its predictions' are.
func (m *Map) leaveOut(i int) (zmap, zanch float64, good bool) {
	fm := &m.fit
	e := &m.ents[i]
	if m.o.prior == nil || len(m.ents) < 2 {
		return 0, 0, false
	}
	pv := m.posVar()
	// the fit
	phi := fm.basis(e.x)
	var g float64
	for a := range fm.k {
		for b := range fm.k {
			g += phi[a] * fm.cov[a][b] * phi[b]
		}
	}
	w := (fm.tau2 + pv) * e.mult // the variance the fit gave the point
	h := g / w
	if !(h < 1-1e-9) {
		return 0, 0, false
	}
	rm, rv := m.residualWithout(e.x, i)
	em := e.r/(1-h) - rm
	vm := g/(1-h) + rv + pv
	// the prior, anchored to the nearest other point
	k := i - 1
	if k < 0 || i+1 < len(m.ents) && m.ents[i+1].x-e.x < e.x-m.ents[k].x {
		k = i + 1
	}
	ek := &m.ents[k]
	pp, ok1 := m.o.prior.Predict(e.pt.Freq)
	pa, ok2 := m.o.prior.Predict(ek.pt.Freq)
	if !ok1 || !ok2 || !finite(pp.Pos) || !finite(pa.Pos) || !finite(pp.Slope) || !finite(pp.Sigma) || !finite(pa.Sigma) {
		return 0, 0, false
	}
	hs := -e.fHz / 2 * pp.Slope
	ea := float64(e.pt.Pos) - (pp.Pos + (float64(ek.pt.Pos) - pa.Pos) + hs*(e.eps-ek.eps) + (e.off - ek.off))
	va := m.cal.scale(cPrior)*m.priorDiffVar(&pp, &pa, e.fHz, ek.fHz) + 2*pv
	if !(vm > 0) || !(va > 0) {
		return 0, 0, false
	}
	return math.Abs(em) / math.Sqrt(vm), math.Abs(ea) / math.Sqrt(va), true
}

// priorDiffVar is the variance of the difference of the prior's errors at two frequencies (in
// MHz) with predictions p and a: alike when the frequencies are close, so that an anchor
// cancels them there and not far away.
func (m *Map) priorDiffVar(p, a *Prediction, f, fa float64) float64 {
	dl := math.Log(f / fa)
	rho := math.Exp(-dl * dl / m.o.priorReachSq2)
	return math.Max(p.Sigma*p.Sigma+a.Sigma*a.Sigma-2*rho*p.Sigma*a.Sigma, 0)
}

// predictPrior is the prior alone, for an empty map.
func (m *Map) predictPrior(q *query) (outcome, bool) {
	if m.o.prior == nil {
		return outcome{}, false
	}
	p, ok := m.o.prior.Predict(q.f)
	if !ok || !finite(p.Pos) || !finite(p.Sigma) || !finite(p.Slope) {
		return outcome{}, false
	}
	v := m.cal.scale(cPrior) * p.Sigma * p.Sigma
	p.Sigma = math.Sqrt(v)
	p.Source = SourcePrior
	o := outcome{Prediction: p, h: -q.fHz / 2 * p.Slope, nb: [2]int{-1, -1}, vf: v}
	o.parts[cPrior] = v
	return o, true
}

// score notes the error of the prediction pr (made for q; nil for the bare prior) against the
// position a tune found, in the calibration: the sources pr rests on learn from it, and the
// predictor that was not used is scored too, for its own source alone, so that the choice
// between them has the errors of both to go by.
func (m *Map) score(pr *outcome, found float64, q *query) {
	all := [nComp]float64{1, 1, 1, 1, 1}
	all[cShape] = pr.far()
	parts := pr.parts
	parts[cNoise] += m.posVar()
	m.cal.note(found-pr.Pos, &parts, all)
	if q == nil || m.fit.k == 0 || m.o.prior == nil {
		return
	}
	var other outcome
	var own int
	if pr.Source == SourceMap {
		ap, ok := m.predictAnchored(q, m.nearest(q.u*(1+q.eps)))
		if !ok {
			return
		}
		other, own = ap, cPrior
	} else {
		other, own = m.predictMap(q), cShape
	}
	var use [nComp]float64
	use[own] = 1
	if own == cShape {
		use[own] = other.far()
	}
	parts = other.parts
	parts[cNoise] += m.posVar()
	m.cal.note(found-other.Pos, &parts, use)
}

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
	vp := m.cal.scale(cPrior) * m.priorDiffVar(&pp, &pa, q.fHz, e.fHz)
	dv, g, de, do := m.entryDrift(e, h, q)
	pv := m.posVar()
	qv := pp.Q
	if e.pt.Q > 0 {
		qv = e.pt.Q
	}
	o := outcome{
		Prediction: Prediction{Pos: pos, Slope: pp.Slope, Q: qv, Source: SourceAnchored},
		h:          h,
		gain:       g,
		nb:         [2]int{j, -1},
		w:          [2]float64{1, 0},
	}
	o.parts[cPrior], o.parts[cNoise] = vp, pv
	m.driftParts(&o, q, dv, de, do)
	return o, true
}

// driftParts completes o for q from its drift variance d in the filter's model: it splits d into
// the shares of ε and of the offset, given what each would give alone (de, do; the cross term,
// small as the two wander independently, is shared), scales each as the map's errors have
// shown, and sets Sigma and vf from every part.
func (m *Map) driftParts(o *outcome, q *query, d, de, do float64) {
	x := (d - de - do) / 2
	pe, po := math.Max(de+x, 0), math.Max(do+x, 0)
	if t := pe + po; t > 0 {
		pe, po = pe*d/t, po*d/t
	}
	o.parts[cEps] = m.cal.scaleAt(cEps, q.a) * pe
	o.parts[cOff] = m.cal.scaleAt(cOff, q.a) * po
	var v float64
	for _, p := range o.parts {
		v += p
	}
	o.Sigma = math.Sqrt(v)
	o.vf = v - o.parts[cEps] - o.parts[cOff] + d
}

// slopeSpan is the step of the central difference that gives the map's slope, as a share of
// the residuals' correlation length: wide enough to average over the position noise of close
// points, narrow enough to see the capacitor's bends (the global model's own curvature is exact
// in a central difference).
const slopeSpan = 0.25

// predictMap predicts from the learned points; the fit must exist.
func (m *Map) predictMap(q *query) outcome {
	xq := q.u * (1 + q.eps)
	mean, vs, vn, nb := m.meanAt(xq)
	d := math.Min(slopeSpan*m.fit.reach, 0.25*xq)
	dpdx := (m.mean(xq+d) - m.mean(xq-d)) / (2 * d)
	dpdu := dpdx * (1 + q.eps)
	h := q.u * dpdu
	dv, g, de, do := m.driftVar(&nb, h, q)
	o := outcome{
		Prediction: Prediction{
			Pos:    mean + q.off,
			Slope:  dpdu * (-2 * q.u / q.fHz),
			Q:      m.qAt(&nb),
			Source: SourceMap,
		},
		h:    h,
		gain: g,
		nb:   [2]int{nb.l, nb.r},
		w:    [2]float64{nb.wl, nb.wr},
	}
	o.parts[cShape], o.parts[cNoise] = vs, vn
	m.driftParts(&o, q, dv, de, do)
	return o
}

// driftVar is the variance, in steps², that the drift adds to a prediction with sensitivity h,
// and the covariance of the drift estimate's error with it: near a point, from the drift since
// it was learned; far from any, the same for an average point. de and do are what the errors of
// ε and of the offset alone would give.
func (m *Map) driftVar(nb *nbrs, h float64, q *query) (d float64, g vec, de, do float64) {
	wf := 1 - nb.wl - nb.wr
	if wf > 0 {
		for part, out := range [3]*float64{&d, &de, &do} {
			hq := obsPart(h, q.dT, part)
			fq := decayT(q.a, hq)
			far := q.p.quad(hq) + m.fit.pbar.quad(hq) - 2*m.fit.cbar.bilin(fq, hq)
			*out = wf * math.Max(far, 0)
			if part == 0 {
				ph := q.p.mul(hq)
				fc := decay(q.a, m.fit.cbar.mul(hq))
				for i := range ns {
					g[i] = wf * (ph[i] - fc[i])
				}
			}
		}
	}
	for _, k := range [2]struct {
		i int
		w float64
	}{{nb.l, nb.wl}, {nb.r, nb.wr}} {
		if k.i < 0 || k.w <= 0 {
			continue
		}
		dk, gk, dek, dok := m.entryDrift(&m.ents[k.i], h, q)
		d += k.w * dk
		de += k.w * dek
		do += k.w * dok
		for i := range ns {
			g[i] += k.w * gk[i]
		}
	}
	return math.Max(d, 0), g, de, do
}

// obsPart is the observation vector of a position with sensitivity h at temperature difference
// dT (part 0), or its part for ε alone (1) or the offset alone (2).
func obsPart(h, dT float64, part int) vec {
	switch part {
	case 1:
		return vec{sEps: h, sKappa: h * dT}
	case 2:
		return vec{sOff: 1}
	}
	return obs(h, dT)
}

// entryDrift is the variance of the drift's error, in steps², of a prediction with sensitivity
// h made from entry e alone (the estimate now against the one e was placed with), and the
// covariance of the estimate's error now with it; de and do as in driftVar.
func (m *Map) entryDrift(e *entry, h float64, q *query) (v float64, g vec, de, do float64) {
	for part, out := range [3]*float64{&v, &de, &do} {
		hq := obsPart(h, q.dT, part)
		hk := obsPart(h, e.dT, part)
		// The cross-covariance is carried to the query's time through the decay, F·C.
		*out = math.Max(q.p.quad(hq)+e.p.quad(hk)-2*e.c.bilin(decayT(q.a, hq), hk), 0)
		if part == 0 {
			ph := q.p.mul(hq)
			fc := decay(q.a, e.c.mul(hk))
			for i := range ns {
				g[i] = ph[i] - fc[i]
			}
		}
	}
	return v, g, de, do
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
