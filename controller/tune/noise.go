package tune

import (
	"fmt"
	"math"
	"time"
)

// noiseLevel is the measured reading noise.
type noiseLevel struct {
	rel   float64 // standard deviation of ln |Γ|²
	abs   float64 // standard deviation of |Γ|² itself where it was measured
	gamma float64 // the |Γ|² it was measured at
	// clipped: readings at full reflection hid the noise where it was measured; rel and abs
	// are an earlier measurement's or the assumed noise
	clipped bool
}

// noiseMemory is the latest noise measurement, kept from one operation to the next: the coupler
// and its converter stay the same, so a new measurement near the same |Γ|² pools with it and
// needs fewer readings of its own.
type noiseMemory struct {
	vl, v2 float64 // variances of ln |Γ|² and of |Γ|²
	df     int     // their degrees of freedom, as pooled
	gamma  float64 // the mean |Γ|² they were measured at
	at     time.Time
}

// measureNoise takes a few readings with the motor still and measures their noise, which sizes
// the scan's threshold and averaging and the fine sweep's speed. Where an earlier measurement
// near the same |Γ|² is recent enough, it takes fewer readings and pools them with it. A
// measurement that looks off the dip also gives the coupler's off-dip reading, if none is known
// yet.
func (p *op) measureNoise() (noiseLevel, error) {
	t := p.t
	k := &t.par.noise
	var g []float64
	clipped := 0
	take := func(n int) error {
		for range n {
			s, r, err := p.read("noise")
			if err != nil {
				return err
			}
			if r.Forward >= t.o.MinForward {
				g = append(g, s.Gamma2)
				if s.Gamma2 >= 1 {
					clipped++
				}
			}
		}
		return nil
	}
	mem := t.noise
	fresh := t.noiseFresh()
	n := k.readings
	if fresh {
		n = k.fewReadings
	}
	if err := take(n); err != nil {
		return noiseLevel{}, err
	}
	m, vl, v2 := noiseStats(g, k.logFloor)
	pool := fresh && len(g) >= k.minCarried && math.Abs(math.Log(math.Max(m, k.logFloor)/math.Max(mem.gamma, k.logFloor))) <= k.poolLevels
	if !pool && n < k.readings {
		// the earlier measurement was made elsewhere on the curve: measure in full
		if err := take(k.readings - n); err != nil {
			return noiseLevel{}, err
		}
		m, vl, v2 = noiseStats(g, k.logFloor)
	}
	if len(g) < k.minCarried {
		return noiseLevel{}, fmt.Errorf("%w while measuring the noise", ErrCarrierLost)
	}
	df := len(g) - 1
	var nl noiseLevel
	switch {
	case clipped > 0:
		// Readings at full reflection are clipped (the coupler's leakage adds to the
		// reflection off the dip) and hide some of their noise: what they show is a least,
		// and the earlier measurement (or the noise assumed without one) stands where higher.
		rel, abs := k.clippedRel, k.clippedAbs
		if fresh {
			rel, abs = math.Sqrt(mem.vl), math.Sqrt(mem.v2)
		}
		nl = noiseLevel{rel: math.Max(rel, math.Sqrt(vl)), abs: math.Max(abs, math.Sqrt(v2)), gamma: m, clipped: true}
	default:
		if pool {
			old := min(mem.df, k.memoryWeight)
			vl = (vl*float64(df) + mem.vl*float64(old)) / float64(df+old)
			v2 = (v2*float64(df) + mem.v2*float64(old)) / float64(df+old)
			df += old
		}
		t.noise = noiseMemory{vl: vl, v2: v2, df: df, gamma: m, at: t.d.Clock.Now()}
		nl = noiseLevel{rel: math.Sqrt(vl), abs: math.Sqrt(v2), gamma: m}
	}
	if m > k.offDipGamma2 && p.baseline == 1 {
		p.baseline = m // most likely off the dip: the coupler's own off-dip reading
	}
	// a few readings can come out alike by chance on a quantised converter: keep a floor
	nl.rel = math.Max(nl.rel, k.relFloor)
	nl.abs = math.Max(nl.abs, k.absFloor)
	p.noise = nl
	p.t.emit(Event{Kind: KindNoise, Freq: p.res.Freq, Gamma2: m,
		Text: fmt.Sprintf("reading noise %.2f %% relative, %.4f absolute at |Γ|² %.3f", 100*nl.rel, nl.abs, m)})
	return nl, nil
}

// noiseKnown is the earlier measurement, where it is recent and its noise, even
// noiseParams.change times higher now, would neither slow the fine sweep through a dip of
// half-width w below its fastest nor make the scan average: a new measurement could change
// nothing but the fit's weights, which the earlier one gives as well.
func (p *op) noiseKnown(w float64) (noiseLevel, bool) {
	t := p.t
	k := &t.par.noise
	if !t.noiseFresh() {
		return noiseLevel{}, false
	}
	nl := noiseLevel{rel: math.Max(math.Sqrt(t.noise.vl), k.relFloor), abs: math.Max(math.Sqrt(t.noise.v2), k.absFloor), gamma: t.noise.gamma}
	worse := noiseLevel{rel: k.change * nl.rel, abs: k.change * nl.abs, gamma: nl.gamma}
	fg := k.flankGamma2
	_, spacing := p.sweepSpeed(w, worse.flank(fg)/fg, 1)
	if n, _ := worse.averaging(&t.par.scan); n > 1 || spacing < t.par.sweep.maxSpacing*w {
		return noiseLevel{}, false
	}
	return nl, true
}

// noiseFresh says whether an earlier noise measurement is recent enough to pool with.
func (t *Tuner) noiseFresh() bool {
	return t.noise.df > 0 && t.d.Clock.Now().Sub(t.noise.at) <= t.par.noise.memoryAge
}

// noiseStats are the mean of readings g and the sample variances of ln g and of g.
func noiseStats(g []float64, logFloor float64) (mean, vl, v2 float64) {
	if len(g) < 2 {
		return 0, 0, 0
	}
	var ml float64
	for _, v := range g {
		ml += math.Log(math.Max(v, logFloor))
		mean += v
	}
	ml /= float64(len(g))
	mean /= float64(len(g))
	for _, v := range g {
		d := math.Log(math.Max(v, logFloor)) - ml
		vl += d * d
		v2 += (v - mean) * (v - mean)
	}
	n := float64(len(g) - 1)
	return mean, vl / n, v2 / n
}

// averaging is how many readings a scan or sweep must average for a dip to stand clear of the
// noise off it (k.sigmas standard deviations within k.maxThreshold), and that noise.
func (n noiseLevel) averaging(k *scanParams) (readings int, sd float64) {
	sd = n.offDip()
	readings = int(math.Ceil(math.Pow(k.sigmas*sd/k.maxThreshold, 2)))
	return min(max(readings, 1), k.maxAveraging), sd
}

// offDip is the noise of one |Γ|² reading off the dip, where |Γ|² is near one: the absolute
// noise measured, or the relative noise of a log detector there, whichever is the larger (the
// noise may have been measured on the dip, where a log detector's absolute noise is small).
func (n noiseLevel) offDip() float64 { return math.Max(n.abs, n.rel) }

// flank is the noise to expect on the dip's flanks at |Γ|² g, where the fit gets its
// information: the relative noise of a log detector there, or an absolute noise floor,
// whichever is the larger.
func (n noiseLevel) flank(g float64) float64 {
	if n.gamma > g {
		// measured off the dip, where both laws look alike: take the log detector's
		return g * n.rel
	}
	return math.Max(g*n.rel, n.abs)
}
