package memmap

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"sync"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"
)

func mustNew(t testing.TB, o Options) *Map {
	t.Helper()
	m, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func mustLearn(t testing.TB, m *Map, p Point) {
	t.Helper()
	if err := m.Learn(p); err != nil {
		t.Fatal(err)
	}
}

func celsius(c float64) physic.Temperature {
	return physic.ZeroCelsius + physic.Temperature(math.Round(c*1e9))
}

// spreadFreqs returns n frequencies spread evenly over every band, band by band.
func spreadFreqs(n int) []physic.Frequency {
	var fs []physic.Frequency
	for i := range n {
		b := worldBands[i%len(worldBands)]
		k := float64(i/len(worldBands)) + 0.5
		per := float64((n + len(worldBands) - 1) / len(worldBands))
		hz := b.lo + (b.hi-b.lo)*k/per
		fs = append(fs, physic.Frequency(math.Round(hz))*physic.Hertz)
	}
	return fs
}

func TestOptionsValidation(t *testing.T) {
	for _, tc := range []struct {
		name string
		o    Options
		want string // "" for valid
	}{
		{"defaults", Options{}, ""},
		{"all set", Options{MaxPoints: 10, MergeWithin: -1, PosNoise: 2, Bend: 50, Reach: 3000,
			QuadMinPoints: -1, DriftHalfLife: time.Hour, DriftMax: 1e-3, TempCoeff: -1, OffsetMax: -1,
			PriorReach: 1}, ""},
		{"one point", Options{MaxPoints: 1}, "MaxPoints"},
		{"nan noise", Options{PosNoise: math.NaN()}, "PosNoise"},
		{"negative bend", Options{Bend: -1}, "Bend"},
		{"inf reach", Options{Reach: math.Inf(1)}, "Reach"},
		{"quad of three", Options{QuadMinPoints: 3}, "QuadMinPoints"},
		{"short half-life", Options{DriftHalfLife: time.Second}, "DriftHalfLife"},
		{"huge drift", Options{DriftMax: 0.5}, "DriftMax"},
		{"huge tempco", Options{TempCoeff: 1}, "TempCoeff"},
		{"nan offset", Options{OffsetMax: math.NaN()}, "OffsetMax"},
		{"negative reach of prior", Options{PriorReach: -1}, "PriorReach"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := New(tc.o)
			switch {
			case tc.want == "" && err != nil:
				t.Fatalf("New: %v", err)
			case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
				t.Fatalf("New: %v, want an error naming %s", err, tc.want)
			}
		})
	}
	// All bad fields are reported at once.
	_, err := New(Options{MaxPoints: 1, Bend: -1, DriftMax: -1})
	for _, name := range []string{"MaxPoints", "Bend", "DriftMax"} {
		if err == nil || !strings.Contains(err.Error(), name) {
			t.Errorf("New with three bad fields: %v, want %s named", err, name)
		}
	}
}

func TestLearnRejectsInvalidPoints(t *testing.T) {
	good := Point{Freq: 7 * physic.MegaHertz, Pos: 1000, At: epoch, SWR: 1.2, Q: 300}
	for _, tc := range []struct {
		name string
		edit func(*Point)
	}{
		{"zero frequency", func(p *Point) { p.Freq = 0 }},
		{"negative frequency", func(p *Point) { p.Freq = -physic.Hertz }},
		{"position beyond 2^52", func(p *Point) { p.Pos = 1<<52 + 1 }},
		{"below absolute zero", func(p *Point) { p.Temp, p.HasTemp = -1, true }},
		{"swr below 1", func(p *Point) { p.SWR = 0.99 }},
		{"swr infinite", func(p *Point) { p.SWR = math.Inf(1) }},
		{"swr nan", func(p *Point) { p.SWR = math.NaN() }},
		{"q negative", func(p *Point) { p.Q = -1 }},
		{"q nan", func(p *Point) { p.Q = math.NaN() }},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m := mustNew(t, Options{})
			p := good
			tc.edit(&p)
			if err := m.Learn(p); !errors.Is(err, ErrInvalidPoint) {
				t.Fatalf("Learn(%+v) = %v, want ErrInvalidPoint", p, err)
			}
			if m.Len() != 0 {
				t.Fatalf("an invalid point was kept")
			}
		})
	}
	m := mustNew(t, Options{})
	mustLearn(t, m, good)
	if m.Len() != 1 {
		t.Fatalf("Len = %d after one good point", m.Len())
	}
}

// learnStill learns the world's noiseless dips at fs, all at one moment.
func learnStill(t *testing.T, m *Map, w *world, fs []physic.Frequency, at time.Time) {
	t.Helper()
	for _, f := range fs {
		mustLearn(t, m, Point{Freq: f, Pos: pos2steps(w.truePos(f)), At: at, Temp: celsius(20), HasTemp: true})
	}
}

// A capacitor linear in position, with a stray capacitance, puts the dip exactly on a straight
// line in 1/f² (Thomson's formula, common practice): the map must then predict to the step
// everywhere in the bands, and its slope must be the physics'.
func TestLinearCapacitorPredictsToTheStep(t *testing.T) {
	w := &world{capa: linearCap{}}
	// The learned positions are rounded to whole steps: a uniform error of σ = 1/√12 ≈ 0.29
	// step (common practice). The capacitor is known to be straight, to 2 steps.
	m := mustNew(t, Options{PosNoise: 0.29, Bend: 2})
	learnStill(t, m, w, spreadFreqs(15), epoch)
	rng := rand.New(rand.NewPCG(1, 2))
	for range 200 {
		f := randFreq(rng, rng.IntN(len(worldBands)))
		p, ok := m.Predict(f, epoch, nil)
		if !ok || p.Source != SourceMap {
			t.Fatalf("Predict(%v) = %+v, %v", f, p, ok)
		}
		truth := w.truePos(f)
		// One step: the motor's resolution, the precision a dip a few steps wide needs
		// (common practice).
		if math.Abs(p.Pos-truth) > 1 {
			t.Errorf("Predict(%v).Pos = %.2f, the dip is at %.2f", f, p.Pos, truth)
		}
		// Within ±3σ, and σ not absurdly wide: 10 steps is a tenth of the smallest search
		// window a blind search would use on 80 m (from memory). The predictions in a band
		// share one error, that of its three points' rounding, so the 200 are about five
		// draws; all five stay within ±3σ 98.7 % of the time (standard normal tables), within
		// ±2σ only 79 %.
		if math.Abs(p.Pos-truth) > 3*p.Sigma || p.Sigma > 10 {
			t.Errorf("Predict(%v).Sigma = %.2f for an error of %.2f", f, p.Sigma, p.Pos-truth)
		}
		// 1 %: the slope of a map exact to a fraction of a step over hundreds of steps must
		// agree with the physics to well within that (common practice for a derived
		// quantity).
		if want := w.trueSlope(f); math.Abs(p.Slope-want) > 0.01*math.Abs(want) {
			t.Errorf("Predict(%v).Slope = %.5g steps/Hz, physics says %.5g", f, p.Slope, want)
		}
	}
}

// A tabulated, bent capacitor with noisy tunes: between learned points the map must follow the
// bends, and its σ must cover the errors.
func TestTabulatedCapacitorWithNoise(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	w := &world{capa: newBentCap(rng, 0.003)}
	m := mustNew(t, Options{Bend: 0.003 * worldTravel})
	for i, f := range spreadFreqs(60) {
		pos := pos2steps(w.truePos(f) + rng.NormFloat64())
		mustLearn(t, m, Point{Freq: f, Pos: pos, At: epoch.Add(time.Duration(i) * time.Second)})
	}
	at := epoch.Add(time.Minute)
	var sumAbs, sumZ2 float64
	const n = 300
	for range n {
		f := randFreq(rng, rng.IntN(len(worldBands)))
		p, ok := m.Predict(f, at, nil)
		if !ok {
			t.Fatalf("no prediction at %v", f)
		}
		err := p.Pos - w.truePos(f)
		sumAbs += math.Abs(err)
		sumZ2 += (err / p.Sigma) * (err / p.Sigma)
		// 4σ: beyond it a normal error occurs once in 16 000 (standard normal tables).
		if math.Abs(err) > 4*p.Sigma {
			t.Errorf("Predict(%v): error %.1f steps is %.1fσ", f, err, err/p.Sigma)
		}
	}
	// With 12 points a band and 1 step of noise (σ of the position noise), the map averages
	// over neighbours: the mean absolute error of a unit normal is √(2/π) ≈ 0.8 (common
	// practice), and 2 steps leaves room for the bends between points.
	if mean := sumAbs / n; mean > 2 {
		t.Errorf("mean absolute error %.2f steps, want ≤ 2", mean)
	}
	// The σ must not be grossly wider than the errors either: an rms z of 1 is honest; below
	// 0.5 the windows would be four times the area needed (common practice).
	if rms := math.Sqrt(sumZ2 / n); rms < 0.5 || rms > 1.5 {
		t.Errorf("rms of error/σ = %.2f, want within [0.5, 1.5]", rms)
	}
}

func TestMergeRules(t *testing.T) {
	t0 := epoch
	base := Point{Freq: 7074 * physic.KiloHertz, Pos: 11000, At: t0}
	m := mustNew(t, Options{MergeWithin: physic.KiloHertz})
	mustLearn(t, m, base)

	newer := Point{Freq: base.Freq + 500*physic.Hertz, Pos: 10990, At: t0.Add(time.Hour)}
	mustLearn(t, m, newer)
	if pts := m.Points(); len(pts) != 1 || pts[0] != newer {
		t.Fatalf("after a newer point 500 Hz away: %+v, want just %+v", pts, newer)
	}

	older := Point{Freq: base.Freq, Pos: 12345, At: t0.Add(30 * time.Minute)}
	if err := m.Learn(older); !errors.Is(err, ErrSuperseded) {
		t.Fatalf("Learn(older) = %v, want ErrSuperseded", err)
	}
	if pts := m.Points(); len(pts) != 1 || pts[0] != newer {
		t.Fatalf("a superseded point changed the map: %+v", pts)
	}

	apart := Point{Freq: newer.Freq + 1001*physic.Hertz, Pos: 10900, At: t0.Add(2 * time.Hour)}
	mustLearn(t, m, apart)
	if m.Len() != 2 {
		t.Fatalf("a point 1001 Hz away merged: Len = %d", m.Len())
	}

	// One new point within reach of two old ones replaces both.
	both := Point{Freq: newer.Freq + 500*physic.Hertz, Pos: 10950, At: t0.Add(3 * time.Hour)}
	mustLearn(t, m, both)
	if pts := m.Points(); len(pts) != 1 || pts[0] != both {
		t.Fatalf("after a point between two: %+v, want just %+v", pts, both)
	}

	// With merging off, only the same frequency is replaced.
	m = mustNew(t, Options{MergeWithin: -1})
	mustLearn(t, m, base)
	mustLearn(t, m, Point{Freq: base.Freq + physic.Hertz, Pos: 11000, At: t0.Add(time.Minute)})
	mustLearn(t, m, Point{Freq: base.Freq, Pos: 11001, At: t0.Add(2 * time.Minute)})
	if pts := m.Points(); len(pts) != 2 || pts[0].Pos != 11001 {
		t.Fatalf("merging off: %+v", pts)
	}
}

func TestMaxPointsEvictsTheMostCrowded(t *testing.T) {
	m := mustNew(t, Options{MaxPoints: 4})
	t0 := epoch
	fs := []physic.Frequency{3500, 7000, 7010, 7020, 14000} // kHz
	for i, f := range fs {
		mustLearn(t, m, Point{Freq: f * physic.KiloHertz, Pos: int64(50000 - 3*f), At: t0.Add(time.Duration(i) * time.Minute)})
	}
	pts := m.Points()
	if len(pts) != 4 {
		t.Fatalf("Len = %d, want 4", len(pts))
	}
	// 7010 kHz sits in the tightest cluster and is older than 7020 kHz, the newest.
	for _, p := range pts {
		if p.Freq == 7010*physic.KiloHertz {
			t.Fatalf("kept %v, the most crowded point: %+v", p.Freq, pts)
		}
	}
	if pts[0].Freq != 3500*physic.KiloHertz || pts[3].Freq != 14000*physic.KiloHertz {
		t.Fatalf("an end point went: %+v", pts)
	}
}

// The loop warms by 20 K after the map was learned: the inductance grows by 17 ppm/K (copper's
// expansion, from memory), so every dip moves. A few tunes on 40 m must teach the map enough
// of the drift to predict 80 m, where it has not tuned since.
func TestDriftLearnedOnOneBandMovesAnother(t *testing.T) {
	w := &world{capa: linearCap{}}
	m := mustNew(t, Options{PosNoise: 0.29})
	t0 := epoch
	learnStill(t, m, w, spreadFreqs(15), t0)

	f80 := 3600 * physic.KiloHertz
	before := w.truePos(f80)
	rng := rand.New(rand.NewPCG(5, 6))
	var at time.Time
	for i := range 20 {
		at = t0.Add(time.Duration(i+1) * 6 * time.Minute)
		tc := 20 + float64(i+1) // warming by 1 K every six minutes
		w.deltaL = copperTC * (tc - 20)
		f := randFreq(rng, 2)
		mustLearn(t, m, Point{Freq: f, Pos: pos2steps(w.truePos(f)), At: at, Temp: celsius(tc), HasTemp: true})
	}
	temp := celsius(40)
	p, ok := m.Predict(f80, at, &temp)
	if !ok {
		t.Fatal("no prediction")
	}
	truth := w.truePos(f80)
	moved := truth - before
	// Copper's 17 ppm/K over 20 K on the 80 m position (≈ 45 000 steps of capacitance
	// equivalent) moves the dip by some 15 steps; the map must have followed most of it: a
	// quarter left over is the bound (common practice for a tracking estimate).
	if math.Abs(moved) < 10 {
		t.Fatalf("the world moved the dip only %.1f steps; the test needs more", moved)
	}
	if e := p.Pos - truth; math.Abs(e) > 0.25*math.Abs(moved) || math.Abs(e) > 2*p.Sigma {
		t.Errorf("on 80 m after warming: predicted %.1f, dip at %.1f (moved %.1f), σ %.1f", p.Pos, truth, moved, p.Sigma)
	}
	d := m.Drift()
	// ε ≈ −δ for an inductance change δ (see drift.go), so the coefficient is −17 ppm/K;
	// within 30 %: twenty tunes at one band leave it that uncertain (from the filter's σ).
	if want := -copperTC; math.Abs(d.TempCoeff-want) > 0.3*copperTC {
		t.Errorf("fitted temperature coefficient %.3g/K (σ %.2g), want %.3g/K", d.TempCoeff, d.TempCoeffSigma, want)
	}
}

// Without temperatures, a tune far from the map's old points must still pull the drift, and
// the uncertainty near an old point must grow with the time since it was learned.
func TestDriftUncertaintyGrowsWithAge(t *testing.T) {
	w := &world{capa: linearCap{}}
	m := mustNew(t, Options{PosNoise: 0.29})
	t0 := epoch
	for _, f := range spreadFreqs(10) {
		mustLearn(t, m, Point{Freq: f, Pos: pos2steps(w.truePos(f)), At: t0})
	}
	f := 3650 * physic.KiloHertz
	var last float64
	for _, h := range []int{0, 1, 4, 16, 64} {
		p, _ := m.Predict(f, t0.Add(time.Duration(h)*time.Hour), nil)
		if p.Sigma <= last {
			t.Errorf("σ after %d h = %.2f, not above %.2f before", h, p.Sigma, last)
		}
		last = p.Sigma
	}
	// In the long run the drift's share of σ is bounded by DriftMax: at 80 m about
	// 45 000 steps × 5e-4 (the default) ≈ 23 steps, twice that for the two placements.
	p, _ := m.Predict(f, t0.Add(1000*time.Hour), nil)
	if p.Sigma > 60 {
		t.Errorf("σ after 1000 h = %.1f, want bounded near the wander's long-run spread", p.Sigma)
	}
}

func TestShiftMovesEveryPrediction(t *testing.T) {
	w := &world{capa: linearCap{}}
	m := mustNew(t, Options{})
	learnStill(t, m, w, spreadFreqs(12), epoch)
	fs := []physic.Frequency{3550 * physic.KiloHertz, 7100 * physic.KiloHertz, 14200 * physic.KiloHertz}
	var before []Prediction
	for _, f := range fs {
		p, _ := m.Predict(f, epoch, nil)
		before = append(before, p)
	}
	m.Shift(-37)
	for i, f := range fs {
		p, _ := m.Predict(f, epoch, nil)
		// 1e-6 step: float rounding of positions near 5e4 (common practice).
		if math.Abs(p.Pos-(before[i].Pos-37)) > 1e-6 || math.Abs(p.Sigma-before[i].Sigma) > 1e-6 {
			t.Errorf("after Shift(-37) at %v: %+v, before %+v", f, p, before[i])
		}
	}
}

func TestForgetAndReset(t *testing.T) {
	w := &world{capa: linearCap{}}
	m := mustNew(t, Options{})
	learnStill(t, m, w, spreadFreqs(10), epoch)
	n := m.Forget(func(p Point) bool { return p.Freq < 6*physic.MegaHertz })
	if n != 4 || m.Len() != 6 {
		t.Fatalf("Forget below 6 MHz removed %d, left %d; want 4 and 6", n, m.Len())
	}
	for _, p := range m.Points() {
		if p.Freq < 6*physic.MegaHertz {
			t.Fatalf("Forget left %v", p.Freq)
		}
	}
	m.Reset()
	if _, ok := m.Predict(7*physic.MegaHertz, epoch, nil); ok || m.Len() != 0 {
		t.Fatalf("after Reset: Len %d, prediction %v", m.Len(), ok)
	}
	if d := m.Drift(); d != (Drift{}) {
		t.Fatalf("after Reset the drift is %+v", d)
	}
}

func TestPriorWithFewPoints(t *testing.T) {
	prior := physicsPrior{errL: 0.02, sigmaL: 0.02}
	w := &world{capa: linearCap{}}
	f1 := 7050 * physic.KiloHertz

	m := mustNew(t, Options{})
	if _, ok := m.Predict(f1, epoch, nil); ok {
		t.Fatal("an empty map without a prior predicted")
	}
	mustLearn(t, m, Point{Freq: f1, Pos: pos2steps(w.truePos(f1)), At: epoch})
	if _, ok := m.Predict(f1, epoch, nil); ok {
		t.Fatal("a one-point map without a prior predicted")
	}

	m = mustNew(t, Options{Prior: prior})
	p, ok := m.Predict(f1, epoch, nil)
	want, _ := prior.Predict(f1)
	if !ok || p.Source != SourcePrior || p.Pos != want.Pos || p.Sigma != want.Sigma {
		t.Fatalf("empty map: %+v, %v; want the prior's %+v", p, ok, want)
	}

	pos1 := pos2steps(w.truePos(f1))
	mustLearn(t, m, Point{Freq: f1, Pos: pos1, At: epoch})
	p, ok = m.Predict(f1, epoch, nil)
	// 1e-6 step: float rounding (common practice).
	if !ok || p.Source != SourceAnchored || math.Abs(p.Pos-float64(pos1)) > 1e-6 {
		t.Fatalf("one point, at its own frequency: %+v, %v; want %d", p, ok, pos1)
	}
	at1 := p.Sigma
	// Close to the anchor, the anchor takes out most of the prior's error (2 % of L).
	f2 := 7150 * physic.KiloHertz
	p2, _ := m.Predict(f2, epoch, nil)
	pp2, _ := prior.Predict(f2)
	if e, e0 := math.Abs(p2.Pos-w.truePos(f2)), math.Abs(pp2.Pos-w.truePos(f2)); e > e0/4 {
		t.Errorf("100 kHz from the anchor the anchored prior is off by %.0f, the bare prior by %.0f", e, e0)
	}
	for _, f := range []physic.Frequency{7200 * physic.KiloHertz, 10100 * physic.KiloHertz, 14200 * physic.KiloHertz} {
		p, _ := m.Predict(f, epoch, nil)
		pp, _ := prior.Predict(f)
		if p.Sigma <= at1 || p.Sigma > math.Hypot(pp.Sigma, pp.Sigma)+1 {
			t.Errorf("at %v: σ %.1f, want above %.1f (at the point) and at most the prior's twice", f, p.Sigma, at1)
		}
		// The prior is off by 2 % in L: the anchored prediction must stay within its ±2σ.
		if e := p.Pos - w.truePos(f); math.Abs(e) > 2*p.Sigma {
			t.Errorf("at %v the anchored prior is off by %.0f with σ %.0f", f, e, p.Sigma)
		}
	}
}

func TestPredictDoesNotAllocate(t *testing.T) {
	s := newSession(9, linearCap{})
	m := mustNew(t, Options{})
	for range 100 {
		pt, _ := s.tune(s.nextTune())
		m.Learn(pt)
	}
	temp := celsius(15)
	at := s.at
	allocs := testing.AllocsPerRun(200, func() {
		m.Predict(5350*physic.KiloHertz, at, &temp)
	})
	if allocs != 0 {
		t.Fatalf("Predict allocates %.1f times per call", allocs)
	}
}

func TestConcurrentReadersAndLearner(t *testing.T) {
	s := newSession(11, linearCap{})
	m := mustNew(t, Options{})
	var pts []Point
	for range 60 {
		pt, _ := s.tune(s.nextTune())
		pts = append(pts, pt)
	}
	var wg sync.WaitGroup
	stop := make(chan struct{})
	for range 2 {
		wg.Go(func() {
			for {
				select {
				case <-stop:
					return
				default:
				}
				m.Predict(7*physic.MegaHertz, time.Time{}, nil)
				m.Points()
				m.Drift()
			}
		})
	}
	learned := 0
	for _, p := range pts {
		if err := m.Learn(p); err == nil {
			learned++
		}
	}
	close(stop)
	wg.Wait()
	if learned == 0 || m.Len() == 0 || m.Len() > learned {
		t.Fatalf("learned %d, Len %d", learned, m.Len())
	}
}
