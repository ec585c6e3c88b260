package memmap

import (
	"math"
	"time"
)

// The drift of the loop is tracked as five numbers, all relative to the loop as it was at the
// first learned tune (the map's reference state):
//
//	e0     the fractional slope change ε at the reference temperature
//	kappa  the temperature coefficient of ε, per kelvin
//	off    a plain position offset, in steps
//	me, mo the levels e0 and off wander about in the long run: unknown constants
//
// so that a dip at u = 1/f² in the reference state moves to where the reference state had it
// at u·(1+ε), plus off, with ε = e0 + kappa·(T − Tref). The scaling of u is exact for a change
// of the loop's inductance or of the capacitor's scale, whatever the capacitor's law: a change
// by a fraction δ makes every frequency resonate where the reference state resonated at
// u/(1+δ), so ε ≈ −δ.
//
// The estimate is a Kalman filter. e0 and off wander as Ornstein–Uhlenbeck processes about me
// and mo: over a short time a random walk, in the long run bounded by DriftMax and OffsetMax,
// with the estimate relaxing towards the long-run level with DriftHalfLife, which is how old
// evidence is forgotten. The reference state is known exactly (it is the definition of zero);
// the long-run levels are not, since the first tune may have caught the loop anywhere in its
// wander. kappa is a constant to be learned.
//
// Every learned point was placed in the reference state with the estimate of its day, so its
// placement carries that estimate's error e_k; a prediction near it carries today's error e.
// What matters is the difference, whose variance is H·(P + P_k − C_k − C_kᵀ)·Hᵀ with C_k the
// covariance of today's error with the point's. Each point keeps its C_k, carried forward
// through every step of the filter: right after a tune the difference is nil, without further
// tunes it grows as the wander does, and tunes elsewhere make the two errors independent.

// ns is the number of drift states.
const ns = 5

// The drift states.
const (
	sEps = iota
	sKappa
	sOff
	sMeanEps
	sMeanOff
)

type mat [ns][ns]float64

type vec [ns]float64

// obs returns the observation vector of a position with sensitivity h to ε, at temperature
// difference dT from the reference.
func obs(h, dT float64) vec { return vec{sEps: h, sKappa: h * dT, sOff: 1} }

// decayT returns Fᵀ·v for the transition F of a decay factor a.
func decayT(a float64, v vec) vec {
	return vec{
		sEps:     a * v[sEps],
		sKappa:   v[sKappa],
		sOff:     a * v[sOff],
		sMeanEps: (1-a)*v[sEps] + v[sMeanEps],
		sMeanOff: (1-a)*v[sOff] + v[sMeanOff],
	}
}

// decay returns F·v.
func decay(a float64, v vec) vec {
	v[sEps] = a*v[sEps] + (1-a)*v[sMeanEps]
	v[sOff] = a*v[sOff] + (1-a)*v[sMeanOff]
	return v
}

// decayRows returns F·M.
func decayRows(a float64, m *mat) mat {
	out := *m
	for c := range ns {
		out[sEps][c] = a*m[sEps][c] + (1-a)*m[sMeanEps][c]
		out[sOff][c] = a*m[sOff][c] + (1-a)*m[sMeanOff][c]
	}
	return out
}

// quad returns hᵀ·P·h.
func (p *mat) quad(h vec) float64 { return p.bilin(h, h) }

// bilin returns aᵀ·P·b.
func (p *mat) bilin(a, b vec) float64 {
	pb := p.mul(b)
	var s float64
	for i := range ns {
		s += a[i] * pb[i]
	}
	return s
}

// mul returns P·h.
func (p *mat) mul(h vec) vec {
	var v vec
	for i := range ns {
		for j := range ns {
			v[i] += p[i][j] * h[j]
		}
	}
	return v
}

// rowTimes returns hᵀ·M.
func rowTimes(h vec, m *mat) vec {
	var v vec
	for c := range ns {
		for r := range ns {
			v[c] += h[r] * m[r][c]
		}
	}
	return v
}

type filter struct {
	started bool
	at      time.Time // time of the latest step; zero while not started
	x       vec
	p       mat

	hasRef bool
	tref   float64 // °C: the first temperature seen
	hasRec bool
	trec   float64 // °C: the latest temperature seen, assumed when none is given
}

// hoursBetween returns (b − a) in hours, never negative.
func hoursBetween(a, b time.Time) float64 {
	if a.IsZero() || b.IsZero() || !b.After(a) {
		return 0
	}
	return b.Sub(a).Hours()
}

// factor returns the factor by which the wandering states relax towards their long-run levels
// between the filter's time and at.
func (f *filter) factor(at time.Time, o *resolved) float64 {
	return math.Exp2(-hoursBetween(f.at, at) / o.halfLife)
}

// propagated returns the state covariance as it will be at time at, and the decay factor.
func (f *filter) propagated(at time.Time, o *resolved) (mat, float64) {
	a := f.factor(at, o)
	if a == 1 {
		return f.p, a
	}
	// F·P·Fᵀ + Q.
	fp := decayRows(a, &f.p)
	var p mat
	for r := range ns {
		var row vec
		for c := range ns {
			row[c] = fp[r][c]
		}
		// (F·P·Fᵀ)[r] = F·(row r of F·P) taken as a column.
		col := decay(a, row)
		for c := range ns {
			p[r][c] = col[c]
		}
	}
	p[sEps][sEps] += o.capEps * (1 - a*a)
	p[sOff][sOff] += o.capOff * (1 - a*a)
	return p, a
}

// advance moves the filter to time at (not before its own), decaying the estimate, and returns
// the decay factor, which the caller applies to the points' cross-covariances.
func (f *filter) advance(at time.Time, o *resolved) float64 {
	p, a := f.propagated(at, o)
	f.p = p
	f.x = decay(a, f.x)
	if at.After(f.at) {
		f.at = at
	}
	return a
}

// dT returns the temperature difference to the reference that a tune at temperature c (°C,
// valid if has) is taken to have: the latest known temperature stands in for a missing one.
func (f *filter) dT(c float64, has bool) float64 {
	if !f.hasRef {
		return 0
	}
	if !has {
		if !f.hasRec {
			return 0
		}
		c = f.trec
	}
	return c - f.tref
}

// eps returns ε at temperature difference dT.
func (f *filter) eps(dT float64) float64 { return f.x[sEps] + f.x[sKappa]*dT }

// noteTemp records a measured temperature.
func (f *filter) noteTemp(c float64) {
	if !f.hasRef {
		f.hasRef, f.tref = true, c
	}
	f.hasRec, f.trec = true, c
}

// start begins tracking at time at, in the reference state by definition: only the
// temperature coefficient and the long-run levels are unknown.
func (f *filter) start(at time.Time, o *resolved) {
	f.started = true
	f.at = at
	f.x = vec{}
	f.p = mat{}
	f.p[sKappa][sKappa] = o.capKappa
	f.p[sMeanEps][sMeanEps] = o.capEps
	f.p[sMeanOff][sMeanOff] = o.capOff
}

// wander returns the covariance of how far the loop may have wandered over a time whose decay
// factor is a, when nothing ties the two ends together.
func (o *resolved) wander(a float64) mat {
	var p mat
	p[sEps][sEps] = 2 * (1 - a) * o.capEps
	p[sOff][sOff] = 2 * (1 - a) * o.capOff
	return p
}

// innovationClip bounds how far, in standard deviations of the innovation, a single tune can
// pull the drift state, so that one tune after lost steps does not wreck it.
const innovationClip = 4

// update folds in a tune whose position differed from the prediction by r, with innovation
// variance s; gain is the covariance of the state's error with the prediction's. The filter
// must have been advanced to the tune's time. It returns the Kalman gain K, or false if the tune
// told nothing about the drift.
func (f *filter) update(gain vec, r, s float64) (vec, bool) {
	// The innovation variance comes from an approximate model of the map; it may not fall
	// below what the gain implies, or the covariance would stop being one.
	s = math.Max(s, explained(&f.p, gain))
	if !(s > 0) || gain == (vec{}) {
		return vec{}, false
	}
	lim := innovationClip * math.Sqrt(s)
	r = math.Max(-lim, math.Min(lim, r))
	var k vec
	for i := range ns {
		k[i] = gain[i] / s
		f.x[i] += k[i] * r
	}
	for i := range ns {
		for j := range ns {
			f.p[i][j] -= k[i] * gain[j]
		}
	}
	for i := range ns {
		f.p[i][i] = math.Max(f.p[i][i], 0)
		for j := range i {
			v := (f.p[i][j] + f.p[j][i]) / 2
			f.p[i][j], f.p[j][i] = v, v
		}
	}
	return k, true
}

// explained returns gᵀ·P⁻¹·g, the least innovation variance for which P − g·gᵀ/s stays
// positive semi-definite.
func explained(p *mat, g vec) float64 {
	inv := pseudoInverse(p)
	return inv.quad(g)
}

// pseudoInverse inverts a covariance matrix over the directions in which it is not (nearly)
// zero, as when temperatures or offsets are not tracked; elsewhere the result is zero.
func pseudoInverse(p *mat) mat {
	var q mat
	var idx [ns]int
	n := 0
	scale := 0.0
	for i := range ns {
		scale = math.Max(scale, p[i][i])
	}
	for i := range ns {
		if p[i][i] > 1e-12*scale && p[i][i] > 0 {
			idx[n] = i
			n++
		}
	}
	for a := range n {
		for b := range n {
			q[a][b] = p[idx[a]][idx[b]] / math.Sqrt(p[idx[a]][idx[a]]*p[idx[b]][idx[b]])
		}
		q[a][a] += 1e-9
	}
	inv, ok := invertSPD(q, n)
	var out mat
	if !ok {
		return out
	}
	for a := range n {
		for b := range n {
			out[idx[a]][idx[b]] = inv[a][b] / math.Sqrt(p[idx[a]][idx[a]]*p[idx[b]][idx[b]])
		}
	}
	return out
}
