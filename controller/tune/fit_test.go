package tune

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"sort"
	"testing"
)

// synthDip draws a sweep through a dip from the physical model the fit assumes, with
// independent noise: the loop behind a transformer of resistance ratio r, y = (p−p0)/s, plus
// a leakage vector of the given magnitude and phase, read with relative (log-detector) noise.
func synthDip(r *rand.Rand, p0, halfWidth, ratio, leak, phase, relNoise, spacing float64) []sample {
	s := halfWidth / (ratio + 1) // steps per unit y: the half-power point is at y = r+1
	c := cmplx.Rect(leak, phase)
	var out []sample
	start := p0 - 3*halfWidth + r.Float64()*spacing
	for p := start; p < p0+3*halfWidth; p += spacing {
		y := (p - p0) / s
		g := -1 + complex(2*ratio, 0)/complex(ratio+1, y) + c
		g2 := real(g)*real(g) + imag(g)*imag(g)
		g2 *= math.Exp(relNoise * r.NormFloat64())
		out = append(out, sample{Pos: p, Gamma2: g2})
	}
	return out
}

func TestFitFindsTheResonanceNotTheMeasuredMinimum(t *testing.T) {
	k := defaultParams().fit
	// With 20 dB directivity (common practice for a cheap coupler) the measured minimum moves
	// off the resonance by up to 2ε·sinφ in y (here about a fifth of the half-power half-width);
	// the fitted centre must not.
	r := rand.New(rand.NewPCG(3, 4))
	const trials = 300
	var fitErr, minErr []float64
	for range trials {
		p0 := 1000 + r.Float64()
		w := 8 + 4*r.Float64()
		ratio := 0.8 + 0.5*r.Float64()
		f, err := fitDip(&k, synthDip(r, p0, w, ratio, 0.1, r.Float64()*2*math.Pi, 0.01, 0.5), 10, 0.01)
		if err != nil {
			t.Fatal(err)
		}
		if f.Method != "rational" {
			t.Fatalf("fell back to %s", f.Method)
		}
		fitErr = append(fitErr, math.Abs(f.Centre-p0)/w)
		m := fitMinimum(&k, synthDip(r, p0, w, ratio, 0.1, r.Float64()*2*math.Pi, 0.01, 0.5))
		minErr = append(minErr, math.Abs(m.Centre-p0)/w)
	}
	fit95, min95 := quantile(fitErr, 0.95), quantile(minErr, 0.95)
	t.Logf("95th percentile centre error: fit %.4f, measured minimum %.4f half-widths", fit95, min95)
	if fit95 > 0.02 {
		t.Errorf("95th percentile centre error %.3f half-widths, want under 0.02", fit95)
	}
	if min95 < 3*fit95 {
		t.Errorf("the measured minimum (%.3f) should be far worse than the fit (%.3f) under leakage", min95, fit95)
	}
}

func TestFitWidthGivesQ(t *testing.T) {
	k := defaultParams().fit
	r := rand.New(rand.NewPCG(5, 6))
	for range 50 {
		w := 5 + 20*r.Float64()
		f, err := fitDip(&k, synthDip(r, 500, w, 1, 0.03, r.Float64()*6, 0.02, w/8), w*(0.7+0.6*r.Float64()), 0.02)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(f.HalfWidth/w-1) > 0.05 {
			t.Errorf("half-width %.2f, want %.2f", f.HalfWidth, w)
		}
		if f.Chi2 > 3 {
			t.Errorf("χ² %.2f for data drawn from the model", f.Chi2)
		}
	}
}

func TestFitNoisyData(t *testing.T) {
	k := defaultParams().fit
	// Noisier readings (10 % rms on |Γ|², e.g. a diode detector near its floor) still give the
	// centre to a tenth of the half-width in 95 % of sweeps.
	r := rand.New(rand.NewPCG(7, 8))
	var errs []float64
	for range 200 {
		p0 := 200 + r.Float64()
		f, err := fitDip(&k, synthDip(r, p0, 6, 1.1, 0.04, r.Float64()*6, 0.10, 0.5), 6, 0.10)
		if err != nil {
			t.Fatal(err)
		}
		errs = append(errs, math.Abs(f.Centre-p0)/6)
	}
	if q := quantile(errs, 0.95); q > 0.1 {
		t.Errorf("95th percentile centre error %.3f half-widths with 10 %% noise", q)
	}
}

func TestFitRejectsWhatIsNotADip(t *testing.T) {
	k := defaultParams().fit
	r := rand.New(rand.NewPCG(9, 10))
	// A sweep that only caught one flank of the dip: the fit must not invent a centre inside
	// the samples; the answer is the flank's lowest end.
	flank := synthDip(r, 100, 10, 1, 0.03, 1, 0.01, 0.5)
	var half []sample
	for _, s := range flank {
		if s.Pos < 92 {
			half = append(half, s)
		}
	}
	f, err := fitDip(&k, half, 10, 0.01)
	if err != nil {
		t.Fatal(err)
	}
	if f.Method == "rational" || f.Method == "lorentzian" {
		t.Errorf("a flank was fitted as a whole dip (%s, centre %.1f)", f.Method, f.Centre)
	}
	// Flat total reflection: nothing to fit.
	var flat []sample
	for i := range 30 {
		flat = append(flat, sample{Pos: float64(i), Gamma2: 1 - 0.001*r.Float64()})
	}
	if f, _ := fitDip(&k, flat, 5, 0.01); f.Method != "minimum" {
		t.Errorf("flat data fitted as %s", f.Method)
	}
	if _, err := fitDip(&k, flat[:5], 5, 0.01); err == nil {
		t.Error("five samples accepted")
	}
}

func quantile(v []float64, q float64) float64 {
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	return s[int(q*float64(len(s)-1))]
}

func TestFitCurveReproducesTheData(t *testing.T) {
	k := defaultParams().fit
	r := rand.New(rand.NewPCG(11, 12))
	data := synthDip(r, 300, 10, 1.1, 0.03, 1, 0, 0.5) // noiseless
	f, err := fitDip(&k, data, 10, 0.01)
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range data {
		if got := f.curve.Gamma2At(s.Pos); math.Abs(got-s.Gamma2) > 1e-6 {
			t.Fatalf("curve at %.1f = %g, data %g", s.Pos, got, s.Gamma2)
		}
	}
	if !math.IsNaN(fitMinimum(&k, data).curve.Gamma2At(300)) {
		t.Error("a minimum has no curve")
	}
}
