package tune

import (
	"fmt"
	"math"
)

// noiseLevel is the measured reading noise.
type noiseLevel struct {
	rel   float64 // standard deviation of ln |Γ|²
	abs   float64 // standard deviation of |Γ|² itself where it was measured
	gamma float64 // the |Γ|² it was measured at
}

// measureNoise takes a few readings with the motor still and measures their noise, which sizes
// the scan's threshold and averaging and the fine sweep's speed. A measurement that looks off
// the dip also gives the coupler's off-dip reading, if none is known yet.
func (p *op) measureNoise() (noiseLevel, error) {
	k := &p.t.par.noise
	var g []float64
	for range k.readings {
		s, r, err := p.read("noise")
		if err != nil {
			return noiseLevel{}, err
		}
		if r.Forward >= p.t.o.MinForward {
			g = append(g, s.Gamma2)
		}
	}
	if len(g) < k.minCarried {
		return noiseLevel{}, fmt.Errorf("%w while measuring the noise", ErrCarrierLost)
	}
	var nl noiseLevel
	var ml, m float64
	for _, v := range g {
		ml += math.Log(math.Max(v, k.logFloor))
		m += v
	}
	ml /= float64(len(g))
	m /= float64(len(g))
	var vl, v2 float64
	for _, v := range g {
		d := math.Log(math.Max(v, k.logFloor)) - ml
		vl += d * d
		v2 += (v - m) * (v - m)
	}
	n := float64(len(g) - 1)
	nl.rel, nl.abs, nl.gamma = math.Sqrt(vl/n), math.Sqrt(v2/n), m
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
