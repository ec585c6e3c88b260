package replay

import (
	"fmt"
	"maps"
	"math"
	"slices"
	"sort"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
)

// Noise is a recording's reading noise: for each channel, the standard deviation of the natural
// logarithm of its power, a relative scatter (a log detector's noise, constant in dB), and how
// many residuals the estimate rests on. A channel with too few residuals to judge has zero.
type Noise struct {
	Forward, Reflected   float64 // σ of ln P
	ForwardN, ReflectedN int     // residuals behind each estimate
}

// String gives the estimate in dB (σ of 10·log₁₀ P), as a detector's noise is usually quoted.
func (n Noise) String() string {
	return fmt.Sprintf("forward %.3f dB (%d residuals), reflected %.3f dB (%d residuals)",
		n.Forward*dbPerNeper, n.ForwardN, n.Reflected*dbPerNeper, n.ReflectedN)
}

// dbPerNeper turns a standard deviation of ln P into one of 10·log₁₀ P.
var dbPerNeper = 10 / math.Ln10

const (
	// minResiduals is the fewest residuals a channel's estimate may rest on: with eight, the
	// estimate of σ is good to about a quarter (its relative standard error is 1/√(2·8)).
	minResiduals = 8
	// offDipShare is how much of the dip's depth in |Γ|² the reflected channel's neighbour
	// residuals may span: within a fifth of the depth of the level off the dip, a resonance's
	// |Γ|² curve is nearly straight over a few samples (past two half-widths from the centre,
	// its curvature is under a tenth of the centre's), so the residuals there are the noise,
	// not the curve. Nearer the centre the curve bends faster than any sweep samples it.
	offDipShare = 0.2
	// clipSigmas drops residuals this many robust standard deviations out before the final
	// estimate: one normal residual in two thousand is lost, a recorder's glitch is not kept.
	clipSigmas = 3.5
	// maxLagrangeWeight bounds Σ ℓ_k² of a neighbour residual's cubic: evenly spaced
	// neighbours give 0.94; three times that is a cubic stretched to reach a far neighbour,
	// whose residual would show its stretch more than the noise.
	maxLagrangeWeight = 3
	// madToSigma turns a median absolute deviation into a normal standard deviation.
	madToSigma = 1.4826
	// quietNoise is the least noise worth replaying, σ of ln P: a part per million is below
	// every coupler's resolution, and what a noise-free recording shows from its own rounding.
	quietNoise = 1e-6
)

// EstimateNoise measures the reading noise of the samples at freq from the recording itself,
// each channel apart, pooling both directions of travel:
//
//   - samples repeated at one step and direction scatter about their mean by the noise alone;
//   - along each direction, each step's mean differs from the cubic through the means of its
//     two neighbours either side (by step) by the noise, and by what of the curve a cubic
//     does not follow over five samples, which is little where the sweep samples the curve
//     finely; for the reflected channel only residuals off the dip count (offDipShare), for
//     the dip bends faster than a sweep samples it.
//
// Every residual is scaled to the standard deviation of one reading; the estimate is a robust
// standard deviation of them (the median absolute deviation, then the root mean square of those
// within clipSigmas of it). Samples without forward or reflected power are left out.
func EstimateNoise(samples []record.Sample, freq physic.Frequency) Noise {
	var fwd, ref []float64
	for _, d := range []motion.Direction{motion.Up, motion.Down} {
		f, r := residuals(samples, freq, d)
		fwd, ref = append(fwd, f...), append(ref, r...)
	}
	var n Noise
	n.Forward, n.ForwardN = robustSigma(fwd)
	n.Reflected, n.ReflectedN = robustSigma(ref)
	return n
}

// level is one step's readings in one direction: the logs of each channel and the mean |Γ|².
type level struct {
	step   motion.Steps
	lf, lr []float64
	mf, mr float64 // means of lf, lr
	gamma2 float64
	n      int
}

// residuals returns the forward and reflected residuals of direction d, each scaled to one
// reading's standard deviation.
func residuals(samples []record.Sample, freq physic.Frequency, d motion.Direction) (fwd, ref []float64) {
	by := map[motion.Steps]*level{}
	for _, s := range samples {
		if s.Freq != freq || s.Dir != d || s.Forward <= 0 || s.Reflected <= 0 {
			continue
		}
		l := by[s.Step]
		if l == nil {
			l = &level{step: s.Step}
			by[s.Step] = l
		}
		l.lf = append(l.lf, math.Log(float64(s.Forward)))
		l.lr = append(l.lr, math.Log(float64(s.Reflected)))
		l.gamma2 += float64(s.Reflected) / float64(s.Forward)
	}
	levels := make([]*level, 0, len(by))
	for _, step := range slices.Sorted(maps.Keys(by)) {
		l := by[step]
		l.n = len(l.lf)
		l.mf, l.mr = mean(l.lf), mean(l.lr)
		l.gamma2 /= float64(l.n)
		levels = append(levels, l)
	}
	// Repeats: deviations from their own mean, scaled by √(n/(n−1)) for the mean they share.
	for _, l := range levels {
		if l.n < 2 {
			continue
		}
		k := math.Sqrt(float64(l.n) / float64(l.n-1))
		for i := range l.lf {
			fwd = append(fwd, (l.lf[i]-l.mf)*k)
			ref = append(ref, (l.lr[i]-l.mr)*k)
		}
	}
	if len(levels) < 5 {
		return fwd, ref
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, l := range levels {
		lo, hi = math.Min(lo, l.gamma2), math.Max(hi, l.gamma2)
	}
	offDip := hi - offDipShare*(hi-lo)
	// Neighbours: m_j − Σ ℓ_k·m_k over k = j−2, j−1, j+1, j+2, ℓ_k the cubic's Lagrange weights
	// at step j, whose variance is σ²·(1/n_j + Σ ℓ_k²/n_k).
	for j := 2; j+2 < len(levels); j++ {
		nb := [4]*level{levels[j-2], levels[j-1], levels[j+1], levels[j+2]}
		x := float64(levels[j].step)
		var ell [4]float64
		sum2 := 0.0
		for k := range nb {
			ell[k] = 1
			for m := range nb {
				if m != k {
					ell[k] *= (x - float64(nb[m].step)) / float64(nb[k].step-nb[m].step)
				}
			}
			sum2 += ell[k] * ell[k]
		}
		if sum2 > maxLagrangeWeight {
			continue // neighbours so unevenly spaced that the cubic extrapolates
		}
		variance := 1 / float64(levels[j].n)
		rf, rr, off := levels[j].mf, levels[j].mr, levels[j].gamma2 >= offDip
		for k, l := range nb {
			variance += ell[k] * ell[k] / float64(l.n)
			rf -= ell[k] * l.mf
			rr -= ell[k] * l.mr
			off = off && l.gamma2 >= offDip
		}
		fwd = append(fwd, rf/math.Sqrt(variance))
		if off {
			ref = append(ref, rr/math.Sqrt(variance))
		}
	}
	return fwd, ref
}

// robustSigma is the standard deviation of residuals r about zero, robust against a few wild
// ones, and how many it rests on; zero with fewer than minResiduals.
func robustSigma(r []float64) (float64, int) {
	if len(r) < minResiduals {
		return 0, len(r)
	}
	abs := make([]float64, len(r))
	for i, x := range r {
		abs[i] = math.Abs(x)
	}
	sort.Float64s(abs)
	s0 := madToSigma * median(abs)
	var sum float64
	n := 0
	for _, x := range abs {
		if x <= clipSigmas*s0 {
			sum += x * x
			n++
		}
	}
	if n < minResiduals {
		return 0, n
	}
	// The clip at 3.5σ keeps 99.95 % of a normal's variance: no correction needed.
	return math.Sqrt(sum / float64(n)), n
}

func mean(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

// median of sorted x (not empty).
func median(x []float64) float64 {
	m := len(x) / 2
	if len(x)%2 == 1 {
		return x[m]
	}
	return (x[m-1] + x[m]) / 2
}
