package tune

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
)

// The Lorentzian fallback is judged on its χ² as the rational fit is: a curve through readings
// that fit it scores low, one through readings misplaced across the dip (late readings on a
// loaded board) scores above what the judge accepts, or is no fit at all.
func TestLorentzianFallbackIsJudgedOnItsChi2(t *testing.T) {
	k := defaultParams().fit
	maxChi2 := defaultParams().sweep.maxChi2
	r := rand.New(rand.NewPCG(5, 6))
	const p0, w = 1000.0, 10.0
	clean := synthDip(r, p0, w, 1, 0, 0, 0.005, 1)
	f, err := fitLorentzian(&k, clean, w, 0.005)
	if err != nil {
		t.Fatal(err)
	}
	if !(f.Chi2 > 0 && f.Chi2 < 3) {
		t.Fatalf("clean readings: χ² %.2f, want a small positive one", f.Chi2)
	}
	// the readings within a half-width below the centre placed six steps further up, as a
	// drive late on its pulses places them
	moved := make([]sample, len(clean))
	copy(moved, clean)
	for i, s := range moved {
		if s.Pos < p0 && s.Pos > p0-w {
			moved[i].Pos += 6
		}
	}
	f2, err := fitLorentzian(&k, moved, w, 0.005)
	if err == nil && !(f2.Chi2 > maxChi2) {
		t.Fatalf("misplaced readings: χ² %.2f accepted (limit %.0f)", f2.Chi2, maxChi2)
	}
	t.Logf("χ² %.2f clean, %.1f misplaced (%v)", f.Chi2, f2.Chi2, err)
}

func TestUncoveredSide(t *testing.T) {
	f := dipFit{Centre: 100, HalfWidth: 10}
	span := func(lo, hi float64) []sample {
		var s []sample
		for p := lo; p <= hi; p++ {
			s = append(s, sample{Pos: p})
		}
		return s
	}
	for _, c := range []struct {
		lo, hi float64
		want   string
	}{{80, 105, "above"}, {95, 130, "below"}, {90, 110, ""}, {70, 140, ""}} {
		if got := uncovered(f, span(c.lo, c.hi)); got != c.want {
			t.Errorf("readings %v–%v: %q, want %q", c.lo, c.hi, got, c.want)
		}
	}
}

// A verify that reads well below what the fitted curve allows at the final position (a fit
// too shallow, or off-centre) fails; one that reads what the fit says passes.
func TestVerifyFloor(t *testing.T) {
	k := defaultParams().fit
	r := rand.New(rand.NewPCG(7, 8))
	f, err := fitLorentzian(&k, synthDip(r, 500, 12, 0.8, 0, 0, 0.003, 1), 12, 0.003)
	if err != nil {
		t.Fatal(err)
	}
	p := &op{t: &Tuner{par: defaultParams()}, noise: noiseLevel{rel: 0.005}}
	target := motion.Steps(math.Round(f.Centre))
	floor := p.verifyFloor(f, 12, 3, target)
	if at := f.curve.Gamma2At(float64(target)); !(at >= floor) {
		t.Fatalf("the fit's own value at the target %.4f is below the floor %.4f", at, floor)
	}
	if low := f.MinGamma2 / 4; !(low < floor) {
		t.Fatalf("a verify at a quarter of the fit's bottom (%.4f) passes the floor %.4f", low, floor)
	}
}

// A scan from outside its window begins startSigmas σ and the window's margin short of the
// prediction, within the window; with no σ, at the window's end.
func TestScanStart(t *testing.T) {
	p := &op{t: &Tuner{par: defaultParams()}}
	k := p.t.par.scan
	pred := Prediction{Prediction: memmap.Prediction{Pos: 1000, Sigma: 100}, Width: 10}
	noSigma := Prediction{Prediction: memmap.Prediction{Pos: 1000}, Width: 10}
	back := k.startSigmas*100 + k.windowWidths*10
	for _, c := range []struct {
		lo, hi float64
		dir    motion.Direction
		pred   Prediction
		want   float64
	}{
		{600, 1400, motion.Up, pred, 1000 - back},
		{600, 1400, motion.Down, pred, 1000 + back},
		{990, 1400, motion.Up, pred, 990},
		{600, 1010, motion.Down, pred, 1010},
		{600, 1400, motion.Up, noSigma, 600},
		{600, 1400, motion.Down, noSigma, 1400},
	} {
		if got := p.scanStart(c.lo, c.hi, c.pred, c.dir); got != c.want {
			t.Errorf("window %v–%v, %v, σ %v: start %v, want %v", c.lo, c.hi, c.dir, c.pred.Sigma, got, c.want)
		}
	}
}

// A hole in a tune's sweep right at the fitted centre is judged against the sweep's planned
// spacing: several readings missing there make the fit doubtful, the same hole in a sparse
// sweep does not; a calibration's sweeps, checked against each other, are held only to the
// width.
func TestCentreHoleAgainstThePlannedSpacing(t *testing.T) {
	p := &op{t: &Tuner{par: defaultParams(), o: Options{TargetSWR: 2}}}
	f := dipFit{Method: "rational", Centre: 100.3, HalfWidth: 10, MinGamma2: 0.01, Chi2: 1, N: 60}
	var samples []sample
	for x := 80.0; x <= 120; x += 0.5 {
		if x < 98 || x > 103 {
			samples = append(samples, sample{Pos: x})
		}
	}
	if err := p.judge(f, samples, 10, 0.5); err == nil {
		t.Error("a 5-step hole at the centre of a sweep planned 0.5 steps apart was accepted")
	}
	if err := p.judge(f, samples, 10, 2); err != nil {
		t.Errorf("a 5-step hole in a sweep planned 2 steps apart: %v", err)
	}
	p.centreNoise = 0.05
	if err := p.judge(f, samples, 10, 0.5); err != nil {
		t.Errorf("a calibration's sweep: %v", err)
	}
}
