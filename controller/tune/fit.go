package tune

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// sample is one coupler reading placed on the axis: the motor position (fractional: readings
// taken on the move are interpolated between polls) and the measured |Γ|².
type sample struct {
	Pos    float64
	Gamma2 float64
}

// dipFit is the resonance curve fitted to the samples of a sweep through the dip.
type dipFit struct {
	Method    string  // "rational", "lorentzian" or "minimum"
	Centre    float64 // motor position of the loop's resonance (its own |Γ| minimum), steps
	HalfWidth float64 // loaded half-power half-width, steps (0 for "minimum")
	MinGamma2 float64 // measured |Γ|² the curve gives at Centre (includes the coupler's leakage)
	Chi2      float64 // reduced χ² against the noise model and the readings' placement (about 1 for a good fit)
	N         int     // samples used
	curve     curve
	// doubt, if not empty, says why the fit is not to be trusted: a fit that was still doubtful
	// after the most readings, kept only to leave the loop near its dip (see roughError).
	// settle goes to its centre and ends not-tuned; nothing is learned from it.
	doubt string
	// viaPlay: the centre was found sweeping down and turned into final-approach coordinates by
	// the measured play, whose error (a play measured at another speed, or on another dip) it
	// carries besides its own.
	viaPlay bool
	// nearNoise is the rms residual of the readings near the bottom (|Γ|² below
	// fitParams.nearGamma2), 0 where there are too few: a log detector's noise there can be many
	// times what it is off the dip.
	nearNoise float64
}

// curve is a fitted model's coefficients, kept to draw it.
type curve struct {
	method     string
	ref, scale float64
	c          []float64
}

// Gamma2At evaluates the fitted curve at position pos; NaN where there is no curve.
func (c curve) Gamma2At(pos float64) float64 {
	x := (pos - c.ref) / c.scale
	switch c.method {
	case "rational":
		return (c.c[0] + c.c[1]*x + c.c[2]*x*x) / (x*x + c.c[3]*x + c.c[4])
	case "lorentzian":
		return 1 - 1/(c.c[0]+c.c[1]*x+c.c[2]*x*x)
	}
	return math.NaN()
}

var errNoFit = errors.New("no resonance curve fits the samples")

// fitDip fits the resonance to samples taken across a dip. expWidth is the expected half-power
// half-width in steps (from Q and the map's slope) and relNoise the measured relative noise of
// |Γ|² readings (log detectors have a roughly constant relative error).
//
// The model is exact for a resonant loop behind a coupling transformer, seen through a
// coupler of finite directivity: Γ = −1 + 2r/(r + 1 + j·y) with y linear in position, plus a
// constant leakage vector. Its |Γ|² is a ratio of two quadratics in position,
//
//	G(p) = (a + b·x + c·x²) / (x² + e·x + f),   x = (p − p_ref)/scale,
//
// whose denominator is ((x − x₀)² + h²): x₀ is the resonance, where the loop's own |Γ| is
// least, wherever the leakage moves the measured minimum to, and h is the loaded half-power
// half-width. The fit is linear in (a, b, c, e, f) once multiplied out; the
// Sanathanan–Koerner iteration reweights by the previous denominator so that the weighted
// linear problem converges to the true least-squares fit, with weights from the noise model.
func fitDip(k *fitParams, samples []sample, expWidth, relNoise float64) (dipFit, error) {
	if len(samples) < k.minSamples {
		return dipFit{}, fmt.Errorf("%w: %d samples", errNoFit, len(samples))
	}
	if fr, err := fitRational(k, samples, expWidth, relNoise); err == nil {
		return fr, nil
	}
	if fl, err := fitLorentzian(k, samples, expWidth, relNoise); err == nil {
		return fl, nil
	}
	return fitMinimum(k, samples), nil
}

func minSample(samples []sample) int {
	best := 0
	for i, s := range samples {
		if s.Gamma2 < samples[best].Gamma2 {
			best = i
		}
	}
	return best
}

func fitRational(k *fitParams, samples []sample, expWidth, relNoise float64) (dipFit, error) {
	ref := samples[minSample(samples)].Pos
	scale := math.Max(expWidth, k.minScale)
	n := len(samples)
	xs := make([]float64, n)
	for i, s := range samples {
		xs[i] = (s.Pos - ref) / scale
	}
	relNoise = math.Max(relNoise, k.relFloor)
	absNoise := k.absNoise
	model := make([]float64, n) // G from the last fit (the measured values to begin with)
	prevD := make([]float64, n)
	for i, s := range samples {
		model[i] = s.Gamma2
		prevD[i] = xs[i]*xs[i] + 1 // the expected shape: centred, half-width one scale
	}
	a := make([][]float64, n)
	for i := range a {
		a[i] = make([]float64, 5)
	}
	b := make([]float64, n)
	var th []float64
	nearRMS := 0.0
	for range k.iterations {
		for i, s := range samples {
			x, g := xs[i], s.Gamma2
			w := 1 / (prevD[i] * (relNoise*math.Max(model[i], 0) + absNoise))
			a[i][0], a[i][1], a[i][2], a[i][3], a[i][4] = w, w*x, w*x*x, -w*g*x, -w*g
			b[i] = w * g * x * x
		}
		t, err := lsq(a, b, 5)
		if err != nil {
			return dipFit{}, err
		}
		converged := th != nil && math.Abs(t[3]-th[3]) < k.converged && math.Abs(t[4]-th[4]) < k.converged
		th = t
		if th[4]-th[3]*th[3]/4 <= 0 {
			return dipFit{}, fmt.Errorf("%w: denominator has real roots", errNoFit)
		}
		// new weights: the denominator and the model, and the residual floor near the dip
		var nearSq float64
		var nearN int
		for i, s := range samples {
			x := xs[i]
			d := x*x + th[3]*x + th[4]
			prevD[i] = d
			model[i] = (th[0] + th[1]*x + th[2]*x*x) / d
			if model[i] < k.nearGamma2 {
				r := s.Gamma2 - model[i]
				nearSq += r * r
				nearN++
			}
		}
		if nearN >= k.nearReadings {
			nearRMS = math.Sqrt(nearSq / float64(nearN))
			absNoise = math.Max(k.minAbsNoise, nearRMS*k.residualShare)
		}
		if converged {
			break
		}
	}
	x0 := -th[3] / 2
	h := math.Sqrt(th[4] - x0*x0)
	f := dipFit{
		Method:    "rational",
		Centre:    ref + x0*scale,
		HalfWidth: h * scale,
		MinGamma2: (th[0] + th[1]*x0 + th[2]*x0*x0) / (h * h),
		N:         n,
		curve:     curve{method: "rational", ref: ref, scale: scale, c: th},
		nearNoise: nearRMS,
	}
	// χ² against the noise model and the readings' placement: a reading taken on the move is
	// placed to a whole step, which on a steep flank is worth more than the converter's noise.
	chi := 0.0
	for i, s := range samples {
		x := xs[i]
		d := x*x + th[3]*x + th[4]
		slope := ((th[1]+2*th[2]*x)*d - (th[0]+th[1]*x+th[2]*x*x)*(2*x+th[3])) / (d * d) / scale
		sd := math.Hypot(relNoise*math.Max(model[i], 0)+absNoise, slope*k.placement)
		r := (s.Gamma2 - model[i]) / sd
		chi += r * r
	}
	f.Chi2 = chi / float64(max(n-5, 1))
	// A bottom a little below zero is noise: the noise near the dip is what the residuals
	// there say (absNoise), which a coupler's leakage and a detector's error near its floor can
	// make far more than the quiet readings off the dip suggest.
	if err := f.plausible(k, samples, expWidth, th[2], math.Min(k.minBottom, -k.bottomSigmas*absNoise)); err != nil {
		return dipFit{}, err
	}
	return f, nil
}

// plausible rejects fits that the samples do not support: a centre outside the swept span,
// too few samples on either side of it, a width far from any the loop can have, a far-off
// |Γ|² that is not near total reflection, or a |Γ|² at the centre below minBottom or above
// fitParams.maxBottom.
func (f dipFit) plausible(k *fitParams, samples []sample, expWidth, far, minBottom float64) error {
	lo, hi := samples[0].Pos, samples[0].Pos
	for _, s := range samples {
		lo, hi = math.Min(lo, s.Pos), math.Max(hi, s.Pos)
	}
	if f.Centre < lo || f.Centre > hi {
		return fmt.Errorf("%w: centre %.1f outside the swept %.1f–%.1f", errNoFit, f.Centre, lo, hi)
	}
	if f.HalfWidth < k.minWidthRatio*expWidth || f.HalfWidth > k.maxWidthRatio*expWidth {
		return fmt.Errorf("%w: half-width %.2f steps against %.2f expected", errNoFit, f.HalfWidth, expWidth)
	}
	below, above := 0, 0
	for _, s := range samples {
		d := s.Pos - f.Centre
		if math.Abs(d) <= k.sideWidths*f.HalfWidth {
			if d < 0 {
				below++
			} else {
				above++
			}
		}
	}
	if below < k.sideReadings || above < k.sideReadings {
		return fmt.Errorf("%w: %d samples below and %d above the centre", errNoFit, below, above)
	}
	if far < k.minFar || far > k.maxFar {
		return fmt.Errorf("%w: far-off |Γ|² %.2f", errNoFit, far)
	}
	if f.MinGamma2 < minBottom || f.MinGamma2 > k.maxBottom {
		return fmt.Errorf("%w: |Γ|² %.3f at the centre", errNoFit, f.MinGamma2)
	}
	return nil
}

// fitLorentzian is the fallback: the absorbed share 1 − |Γ|² of a resonance is a Lorentzian in
// position, so its reciprocal is a parabola. Only samples in the upper part of the peak are
// used, weighted by the square of the absorbed share (the reciprocal's error grows as 1/A²).
// Its χ² is taken over those samples against the same noise and placement model as the
// rational fit's, so that a fallback resting on a few misplaced readings is judged doubtful as
// that one would be, not waved through for want of a χ².
func fitLorentzian(k *fitParams, samples []sample, expWidth, relNoise float64) (dipFit, error) {
	aMax := 0.0
	for _, s := range samples {
		aMax = math.Max(aMax, 1-s.Gamma2)
	}
	if aMax < k.minDepth {
		return dipFit{}, fmt.Errorf("%w: no dip deeper than %.0f %%", errNoFit, 100*k.minDepth)
	}
	ref := samples[minSample(samples)].Pos
	scale := math.Max(expWidth, k.minScale)
	var a [][]float64
	var b []float64
	var used []sample
	for _, s := range samples {
		ab := 1 - s.Gamma2
		if ab < k.peakShare*aMax {
			continue
		}
		x := (s.Pos - ref) / scale
		w := ab * ab
		a = append(a, []float64{w, w * x, w * x * x})
		b = append(b, w/ab)
		used = append(used, s)
	}
	th, err := lsq(a, b, 3)
	if err != nil {
		return dipFit{}, err
	}
	if th[2] <= 0 {
		return dipFit{}, fmt.Errorf("%w: reciprocal opens downward", errNoFit)
	}
	x0 := -th[1] / (2 * th[2])
	peak := th[0] - th[1]*th[1]/(4*th[2]) // 1/A at the centre
	if peak <= 0 {
		return dipFit{}, fmt.Errorf("%w: negative peak", errNoFit)
	}
	f := dipFit{Method: "lorentzian", Centre: ref + x0*scale, HalfWidth: math.Sqrt(peak/th[2]) * scale,
		MinGamma2: 1 - 1/peak, N: len(a), curve: curve{method: "lorentzian", ref: ref, scale: scale, c: th}}
	relNoise = math.Max(relNoise, k.relFloor)
	chi := 0.0
	for _, s := range used {
		x := (s.Pos - ref) / scale
		q := th[0] + th[1]*x + th[2]*x*x
		model := 1 - 1/q
		slope := (th[1] + 2*th[2]*x) / (q * q) / scale
		sd := math.Hypot(relNoise*math.Max(model, 0)+k.absNoise, slope*k.placement)
		r := (s.Gamma2 - model) / sd
		chi += r * r
	}
	f.Chi2 = chi / float64(max(len(used)-3, 1))
	if err := f.plausible(k, samples, expWidth, 1, k.minBottom); err != nil {
		return dipFit{}, err
	}
	return f, nil
}

// fitMinimum is the last resort: the lowest reading, averaged with the readings within
// fitParams.minimumSpan steps of it.
func fitMinimum(k *fitParams, samples []sample) dipFit {
	s := append([]sample(nil), samples...)
	sort.Slice(s, func(i, j int) bool { return s[i].Pos < s[j].Pos })
	best := minSample(s)
	sum, sw, g := 0.0, 0.0, 0.0
	for _, v := range s {
		if math.Abs(v.Pos-s[best].Pos) <= k.minimumSpan {
			sum += v.Pos
			g += v.Gamma2
			sw++
		}
	}
	return dipFit{Method: "minimum", Centre: sum / sw, MinGamma2: g / sw, N: int(sw)}
}
