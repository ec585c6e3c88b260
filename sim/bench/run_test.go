package bench

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/vclock"
)

// TestPhasesAddUpToTheTune: every case's phases add up to its tune time, within 1 ms (the
// phases are counted in nanoseconds of virtual time, so any gap is a bookkeeping error), cold
// and warm, standard and harsh, for the controller and both references.
func TestPhasesAddUpToTheTune(t *testing.T) {
	for _, ranges := range []string{StandardRanges, HarshRanges} {
		for _, m := range []MapState{Cold, Warm} {
			rep, err := Run(context.Background(), Options{N: 8, Seed: 5, Map: m, Ranges: ranges, Workers: 2})
			if err != nil {
				t.Fatal(err)
			}
			for _, c := range rep.Cases {
				if d := math.Abs(c.Phases.Sum() - c.TuneS); d > 1e-3 {
					t.Errorf("%s %s scenario %d %s: phases %+v add up to %.6f s, the tune took %.6f s",
						ranges, m, c.Scenario, c.Strategy, c.Phases, c.Phases.Sum(), c.TuneS)
				}
				for i, v := range c.Phases.Values() {
					if v < 0 {
						t.Errorf("%s %s scenario %d %s: %s %.6f s", ranges, m, c.Scenario, c.Strategy, PhaseNames[i], v)
					}
				}
			}
			// The time is spread over the phases, not booked to one: every tune moves, reads
			// and approaches.
			s := rep.Strategies[Tankd]
			if mp := s.MeanPhases(); mp.Travel <= 0 || mp.Readings <= 0 || mp.Approach <= 0 {
				t.Errorf("%s %s: mean phases %+v: no travel, readings or approach", ranges, m, mp)
			}
			if d := math.Abs(s.MeanPhases().Sum() - s.MeanTuneS); d > 1e-3 {
				t.Errorf("%s %s: mean phases %+v add up to %.6f, the mean tune is %.6f", ranges, m, s.MeanPhases(), s.MeanPhases().Sum(), s.MeanTuneS)
			}
		}
	}
}

// TestReferencesFromTruthMatchStepped: the references computed from the truth take the same
// time, to the nanosecond, as the same strategies stepped through the motion loop and the
// simulator, phase by phase, and end at the same SWR, on a sample of scenarios cold and warm.
// The noise and the lost pulses, which the two draw from different streams, are switched off
// here: with them on, both are as random as each other (see exhaustiveFromTruth), and the
// benchmark's figures agree within their scatter.
func TestReferencesFromTruthMatchStepped(t *testing.T) {
	if testing.Short() {
		t.Skip("steps the exhaustive sweep through the motion loop")
	}
	ctx := context.Background()
	stations := sim.Presets()
	names := sortedKeys(stations)
	for _, m := range []MapState{Cold, Warm} {
		scs, err := Generate(stations, names, 5, 11, m, DefaultKnobs())
		if err != nil {
			t.Fatal(err)
		}
		for _, sc := range scs {
			sc.Truth.Simulator.Coupler.ADCNoiseMV = 0
			sc.Truth.Simulator.Drive.MissRate = 0
			fast, err := runScenario(ctx, sc, false)
			if err != nil {
				t.Fatal(err)
			}
			slow, err := runScenario(ctx, sc, true)
			if err != nil {
				t.Fatal(err)
			}
			for i := range fast {
				f, s := fast[i].Case, slow[i].Case
				if f.Strategy == Tankd {
					if !reflect.DeepEqual(f, s) {
						t.Errorf("%s scenario %d: the controller's case depends on how the references run:\n%+v\n%+v", m, sc.ID, f, s)
					}
					continue
				}
				if f.TuneS != s.TuneS || f.RFS != s.RFS || f.Success != s.Success || f.Outcome != s.Outcome {
					t.Errorf("%s scenario %d %s (%s): computed tune %.9f s RF %.9f s success %t, stepped %.9f s %.9f s %t",
						m, sc.ID, f.Strategy, f.Station, f.TuneS, f.RFS, f.Success, s.TuneS, s.RFS, s.Success)
				}
				for j, v := range f.Phases.Values() {
					if w := s.Phases.Values()[j]; math.Abs(v-w) > 1e-9 {
						t.Errorf("%s scenario %d %s: %s %.9f s computed, %.9f s stepped", m, sc.ID, f.Strategy, PhaseNames[j], v, w)
					}
				}
				// The station's RF model caches by the millikelvin; the truth's need not hit the
				// same cached temperature: 1e-3 of SWR is far wider than that, far narrower
				// than a step's worth on the narrowest dip.
				if math.Abs(f.SWR-s.SWR) > 1e-3 || math.Abs(f.BestSWR-s.BestSWR) > 1e-3 {
					t.Errorf("%s scenario %d %s: computed SWR %.5f (best %.5f), stepped %.5f (best %.5f)",
						m, sc.ID, f.Strategy, f.SWR, f.BestSWR, s.SWR, s.BestSWR)
				}
			}
		}
	}
}

// TestTruthBestIsStationBest: the references' truth answers where the best position is as the
// simulated station itself does.
func TestTruthBestIsStationBest(t *testing.T) {
	_, stations, err := RangesNamed(HarshRanges)
	if err != nil {
		t.Fatal(err)
	}
	for name, s := range stations {
		s.Drive.BacklashSteps = 37 // an odd play: the half step must be kept
		for _, hours := range []int{3, 15} {
			at := vclock.Epoch.Add(time.Duration(hours) * time.Hour)
			st, err := sim.NewStation(s, vclock.New(at))
			if err != nil {
				t.Fatal(err)
			}
			tr, err := newTruth(s, 1)
			if err != nil {
				t.Fatal(err)
			}
			for _, f := range []float64{1.85e6, 3.7e6, 7.15e6} {
				wp, ws, werr := st.Best(f)
				gp, gs, gerr := tr.best(f, at)
				if (werr != nil) != (gerr != nil) || wp != gp || math.Abs(ws-gs) > 1e-9 {
					t.Errorf("%s at %d h, %.0f Hz: truth says %d (SWR %.6f, %v), the station %d (SWR %.6f, %v)",
						name, hours, f, gp, gs, gerr, wp, ws, werr)
				}
			}
		}
	}
}

// TestLostPulsesAtTheirRate: the references' motor loses pulses at the station's miss rate.
func TestLostPulsesAtTheirRate(t *testing.T) {
	const q, n = 1e-4, 2_000_000
	l := newLossStream(7, 0, q)
	lost := 0
	for range n / 1000 {
		lost += len(l.take(1000))
	}
	// A binomial count: mean n·q = 200, σ = √(n·q(1−q)) ≈ 14 (textbook); 4σ either side.
	if want, sd := n*q, math.Sqrt(n*q*(1-q)); math.Abs(float64(lost)-want) > 4*sd {
		t.Errorf("%d of %d pulses lost at a rate of %g: want %.0f ± %.0f", lost, n, q, want, 4*sd)
	}
	if got := newLossStream(7, 0, 0).take(n); len(got) != 0 {
		t.Errorf("a motor that loses nothing lost %d pulses", len(got))
	}
}

// TestCoverageOnASyntheticSet: the shares within 1, 2 and 3 σ and the median, on errors whose
// answer is known by counting; and the grouping by source and extent, which counts only
// tankd's cases with a prediction.
func TestCoverageOnASyntheticSet(t *testing.T) {
	errs := []float64{0.2, 0.9, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0}
	got := coverageOf(errs)
	// by counting: 3 of 8 at most 1, 5 at most 2, 7 at most 3; the median is between 1.5 and 2
	want := Coverage{N: 8, Within1: 3.0 / 8, Within2: 5.0 / 8, Within3: 7.0 / 8, MedianErrorSigmas: 1.75}
	if got != want {
		t.Errorf("coverage %+v, want %+v", got, want)
	}
	if c := coverageOf(nil); c != (Coverage{}) {
		t.Errorf("coverage of nothing: %+v", c)
	}
	cases := []Case{
		{Strategy: Tankd, Prediction: &Prediction{Source: memmap.SourceMap, Extent: ExtentBetween, ErrorSigmas: 0.5}},
		{Strategy: Tankd, Prediction: &Prediction{Source: memmap.SourceMap, Extent: ExtentBeyond, ErrorSigmas: 2.5}},
		{Strategy: Tankd, Prediction: &Prediction{Source: memmap.SourcePrior, Extent: ExtentNone, ErrorSigmas: 1.5}},
		{Strategy: Tankd},
		{Strategy: Oracle, Prediction: &Prediction{Source: memmap.SourceMap, Extent: ExtentBetween, ErrorSigmas: 9}},
	}
	rep := coverageReport(cases)
	if rep.All.N != 3 || rep.All.Within1 != 1.0/3 || rep.All.Within2 != 2.0/3 || rep.All.Within3 != 1 || rep.All.MedianErrorSigmas != 1.5 {
		t.Errorf("all: %+v", rep.All)
	}
	if m := rep.BySource[memmap.SourceMap]; m.N != 2 || m.Within1 != 0.5 || m.MedianErrorSigmas != 1.5 {
		t.Errorf("from the map: %+v", m)
	}
	if p := rep.BySource[memmap.SourcePrior]; p.N != 1 || p.Within2 != 1 {
		t.Errorf("from the prior: %+v", p)
	}
	if b, y := rep.ByExtent[ExtentBetween], rep.ByExtent[ExtentBeyond]; b.N != 1 || b.Within1 != 1 || y.N != 1 || y.Within2 != 0 || y.Within3 != 1 {
		t.Errorf("between %+v, beyond %+v", b, y)
	}
	// the normal distribution's table (textbook): 68.27 %, 95.45 %, 99.73 %, median 0.6745
	n := NormalCoverage()
	for _, c := range []struct{ got, want float64 }{{n.Within1, 0.6827}, {n.Within2, 0.9545}, {n.Within3, 0.9973}, {n.MedianErrorSigmas, 0.6745}} {
		if math.Abs(c.got-c.want) > 5e-5 {
			t.Errorf("normal coverage %v, want %v", c.got, c.want)
		}
	}
}

// TestPredictionErrorInSigmas: the error is the distance from the prediction to the truth's
// best position, placed in the controller's frame, in the prediction's σ.
func TestPredictionErrorInSigmas(t *testing.T) {
	scs, err := Generate(sim.Presets(), []string{"default"}, 1, 3, Cold, DefaultKnobs())
	if err != nil {
		t.Fatal(err)
	}
	sc := scs[0]
	tr, err := newTruth(sc.Truth, sc.Seed)
	if err != nil {
		t.Fatal(err)
	}
	best, _, err := tr.best(Hz(sc.Freq), sc.At)
	if err != nil {
		t.Fatal(err)
	}
	p := predictionProbe{seen: true, at: sc.At, offset: 25, extent: ExtentNone}
	p.pred.Source, p.pred.Pos, p.pred.Sigma = memmap.SourcePrior, float64(best)+25-60, 40
	got, err := p.prediction(sc, tr)
	if err != nil {
		t.Fatal(err)
	}
	if got == nil || got.Best != float64(best+25) || got.ErrorSigmas != 1.5 || got.Extent != ExtentNone {
		t.Errorf("prediction 60 steps below the truth with σ 40: %+v, want 1.5 σ", got)
	}
	p.pred.Sigma = 0
	if got, _ := p.prediction(sc, tr); got != nil {
		t.Errorf("a prediction without σ counted: %+v", got)
	}
	pts := []memmap.Point{{Freq: hzFreq(3.6e6)}, {Freq: hzFreq(3.8e6)}}
	for f, want := range map[float64]string{3700000: ExtentBetween, 3600000: ExtentBetween, 3900000: ExtentBeyond, 1900000: ExtentBeyond} {
		if got := extentOf(pts, hzFreq(f)); got != want {
			t.Errorf("%.0f Hz against points at 3.6 and 3.8 MHz: %s, want %s", f, got, want)
		}
	}
	if got := extentOf(nil, hzFreq(3.7e6)); got != ExtentNone {
		t.Errorf("nothing learned: %s", got)
	}
}

// TestStationFileDrawsOnlyWhatItLeavesOut: a key the station file sets keeps its value in every
// scenario, the others are drawn as before, and the scenarios are otherwise the same as with
// nothing fixed.
func TestStationFileDrawsOnlyWhatItLeavesOut(t *testing.T) {
	path := filepath.Join(t.TempDir(), "mine.toml")
	file := "[drive]\nbacklash_steps = 33\n[simulator.coupler]\ndirectivity_db = 19\nadc_noise_mv = 2.5\n"
	if err := os.WriteFile(path, []byte(file), 0o644); err != nil {
		t.Fatal(err)
	}
	s, fixed, err := LoadStation(path)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]bool{keyBacklash: true, keyDirectivity: true, keyNoise: true}
	if !reflect.DeepEqual(fixed, want) {
		t.Fatalf("fixed keys %v, want %v", fixed, want)
	}
	st := map[string]sim.Spec{"mine": s}
	free := DefaultKnobs()
	free.Bands = []string{"160m", "80m"}
	held := free
	held.Fixed = map[string]map[string]bool{"mine": fixed}
	a, err := Generate(st, []string{"mine"}, 20, 9, Warm, free)
	if err != nil {
		t.Fatal(err)
	}
	b, err := Generate(st, []string{"mine"}, 20, 9, Warm, held)
	if err != nil {
		t.Fatal(err)
	}
	swings := map[float64]bool{}
	for i := range a {
		x, y := a[i], b[i]
		if y.Truth.Drive.BacklashSteps != 33 || y.Truth.Simulator.Coupler.DirectivityDB != 19 || y.Truth.Simulator.Coupler.ADCNoiseMV != 2.5 {
			t.Errorf("scenario %d: the file's values were redrawn: backlash %g, directivity %g, noise %g", i,
				y.Truth.Drive.BacklashSteps, y.Truth.Simulator.Coupler.DirectivityDB, y.Truth.Simulator.Coupler.ADCNoiseMV)
		}
		if x.Freq != y.Freq || x.At != y.At || x.Seed != y.Seed || !reflect.DeepEqual(x.History, y.History) ||
			x.Truth.Simulator.Weather != y.Truth.Simulator.Weather || x.Truth.Simulator.Drive != y.Truth.Simulator.Drive {
			t.Errorf("scenario %d: fixing some keys changed the others' draws", i)
		}
		swings[y.Truth.Simulator.Weather.SwingK] = true
	}
	if len(swings) < 2 {
		t.Error("a key the file leaves out was not drawn")
	}
	drawn := Drawn(st, []string{"mine"}, held)
	keys := map[string]bool{}
	for _, d := range drawn {
		keys[d.Key] = true
	}
	for _, k := range DrawnKeys {
		if keys[k] == fixed[k] {
			t.Errorf("%s: fixed %t, listed as drawn %t", k, fixed[k], keys[k])
		}
	}
}

// TestSmallLoopDipIsAFewStepsWide: the harsh ranges' small loop is what its documentation
// says: at 40 m its SWR is below 2 over only a few steps of the drive.
func TestSmallLoopDipIsAFewStepsWide(t *testing.T) {
	tr, err := newTruth(HarshKinds()[KindSmallLoop], 1)
	if err != nil {
		t.Fatal(err)
	}
	at := vclock.Epoch.Add(12 * time.Hour)
	for _, f := range []float64{7.0e6, 7.1e6, 7.2e6, 7.3e6} {
		best, _, err := tr.best(f, at)
		if err != nil {
			t.Fatal(err)
		}
		n := 0
		for d := -20.0; d <= 20; d++ {
			if tr.swr(f, float64(best)+d-tr.half, at) < 2 {
				n++
			}
		}
		if n < 2 || n > 6 {
			t.Errorf("%.0f Hz: SWR below 2 over %d steps, want a few (2 to 6)", f, n)
		}
	}
}

func hzFreq(f float64) physic.Frequency { return physic.Frequency(math.Round(f)) * physic.Hertz }
