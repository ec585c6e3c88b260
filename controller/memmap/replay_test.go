package memmap

import (
	"math"
	"math/rand/v2"
	"testing"

	"periph.io/x/conn/v3/physic"
)

// sessionHistory is a session's next n tunes as a replay takes them: each tune's point, learned
// after the map has predicted it, and the true dip it is scored against.
func sessionHistory(s *session, n int) []Observation {
	out := make([]Observation, 0, n)
	for range n {
		pt, truth := s.tune(s.nextTune())
		out = append(out, Observation{Point: pt, True: truth, Learn: true})
	}
	return out
}

// replayed is the scores of many replayed sessions, with which of them were extrapolations.
type replayed struct {
	all, extra []Score
}

// replaySessions replays one session per seed of n tunes, built by mk, through a map with
// opts, and keeps the scores of the predictions made with at least from points learned. A
// prediction is an extrapolation when the map had learned points in the tune's band but none
// on one side of its frequency there.
func replaySessions(t *testing.T, seeds, n, from int, mk func(seed uint64) *session, opts Options) replayed {
	t.Helper()
	var out replayed
	for seed := range uint64(seeds) {
		h := sessionHistory(mk(seed), n)
		scores, err := Replay(opts, h)
		if err != nil {
			t.Fatal(err)
		}
		// Replay scores every tune here: a map with a prior, or past its first two points,
		// always predicts. Match the scores to the tunes from the end.
		off := len(h) - len(scores)
		for i, sc := range scores {
			if sc.Points < from {
				continue
			}
			out.all = append(out.all, sc)
			if extrapolates(h[:off+i], sc.Freq) {
				out.extra = append(out.extra, sc)
			}
		}
	}
	return out
}

// extrapolates says whether f lies beyond the points learned before it in its band, on one
// side, with at least one there.
func extrapolates(before []Observation, f physic.Frequency) bool {
	b := bandOf(f)
	below, above := false, false
	for _, o := range before {
		if !o.Learn || bandOf(o.Freq) != b {
			continue
		}
		below = below || o.Freq < f
		above = above || o.Freq > f
	}
	return below != above
}

func bandOf(f physic.Frequency) int {
	hz := float64(f) / float64(physic.Hertz)
	for i, b := range worldBands {
		if hz >= b.lo && hz <= b.hi {
			return i
		}
	}
	return -1
}

// quietSession is a loop much better than the options guess: no wander beyond what its
// temperature explains, tunes that find the dip to 0.4 step (about what the simulator's tuner
// does, rounding to whole steps included).
func quietSession(seed uint64) *session {
	s := newSession(seed, linearCap{})
	s.wanderL, s.wanderO, s.noise = 0, 0, 0.4
	return s
}

// The map's σ is honest where its options describe the loop, and learns to be tight where the
// loop is better than they guess; scored through Replay against the true dips of many seeded
// sessions (world_test.go), every prediction made before its tune.
//
// Bounds, by the coverage of a normal error (68.3 %, 95.4 %, 99.7 % within 1, 2, 3σ and a median
// |z| of 0.674, standard normal tables):
//   - within 2σ in [0.92, 0.99] and within 3σ at least 0.975 where the options are right. The
//     predictions of a session share their errors, so thousands weigh like far fewer; and the
//     errors are heavier-tailed than normal (a prediction just after a wander step, a point
//     learned at an unlucky temperature reading), so the 3σ figure is a little below the normal
//     one by design of the world, not of the map. (Common practice for a calibration check.)
//   - on the quiet loop, whose options guess its wander at many times the truth and its noise
//     at twice it, a median |z| of at least 0.38 over a season of tunes (σ at most about 1.8
//     times what the errors need), and of at least 0.28 over a warm-up's (at most about 2.4
//     times: with five to nine points in two or three bands, a prediction beyond a band's points
//     still carries much of the guessed bend of the law, which so few tunes cannot refute);
//     within 3σ at least 0.98 in both, so that the tighter windows still hold the dip. (A map
//     whose guesses kept a tenth of an error's weight for the drift and the noise, and whose
//     errors never scaled the law's variance, gave 0.26 and 0.35.)
//   - extrapolations beyond a band's learned points miss their ±3σ window at most 1 % of the
//     time in either world: that is where a map that trusts the wrong predictor misses.
func TestReplayCoverage(t *testing.T) {
	bent := func(seed uint64) *session {
		return newSession(seed, newBentCap(rand.New(rand.NewPCG(seed, 7)), 0.003))
	}
	linear := func(seed uint64) *session { return newSession(seed, linearCap{}) }
	prior := physicsPrior{errL: 0.02, sigmaL: 0.02}
	for _, tc := range []struct {
		name      string
		mk        func(uint64) *session
		opts      Options
		n, from   int
		within2   [2]float64
		within3   float64
		minMedian float64
		maxMedian float64
	}{
		{"options right, linear capacitor", linear, Options{}, 80, 0, [2]float64{0.92, 0.99}, 0.975, 0.5, 0.85},
		{"options right, tabulated capacitor with a prior", bent,
			Options{Bend: 0.003 * worldTravel, Prior: prior}, 80, 0, [2]float64{0.92, 0.99}, 0.975, 0.5, 0.85},
		{"quiet loop, a warm-up's worth of tunes", quietSession, Options{Prior: prior}, 10, 5, [2]float64{0.92, 1}, 0.98, 0.28, 0.85},
		{"quiet loop, a season's worth of tunes", quietSession, Options{Prior: prior}, 80, 5, [2]float64{0.92, 1}, 0.98, 0.38, 0.85},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := replaySessions(t, 100, tc.n, tc.from, tc.mk, tc.opts)
			c := Summarise(r.all)
			t.Log("all:", c)
			if c.N < 400 {
				t.Fatalf("only %d predictions scored", c.N)
			}
			if w := c.Within[1]; w < tc.within2[0] || w > tc.within2[1] {
				t.Errorf("%.3f within 2σ, want [%.2f, %.2f]", w, tc.within2[0], tc.within2[1])
			}
			if w := c.Within[2]; w < tc.within3 {
				t.Errorf("%.3f within 3σ, want at least %.3f", w, tc.within3)
			}
			if m := c.MedianAbsZ; m < tc.minMedian || m > tc.maxMedian {
				t.Errorf("median |z| %.3f, want [%.2f, %.2f]", m, tc.minMedian, tc.maxMedian)
			}
			x := Summarise(r.extra)
			t.Log("extrapolations:", x)
			if x.N < 50 {
				t.Fatalf("only %d extrapolations scored", x.N)
			}
			if miss := 1 - x.Within[2]; miss > 0.01 {
				t.Errorf("%.3f of extrapolations outside ±3σ, want at most 0.01", miss)
			}
		})
	}
}

// Replay scores what the map predicts, the same as asking it directly.
func TestReplayScoresThePredictions(t *testing.T) {
	h := sessionHistory(newSession(4, linearCap{}), 30)
	scores, err := Replay(Options{}, h)
	if err != nil {
		t.Fatal(err)
	}
	m := mustNew(t, Options{})
	k := 0
	for _, ob := range h {
		if p, ok := m.Predict(ob.Freq, ob.At, &ob.Temp); ok {
			sc := scores[k]
			k++
			if sc.Prediction != p || sc.Err != ob.True-p.Pos || sc.Z != sc.Err/p.Sigma || sc.Points != m.Len() {
				t.Fatalf("score %+v, want the prediction %+v scored against %.2f with %d points", sc, p, ob.True, m.Len())
			}
		}
		mustLearn(t, m, ob.Point)
	}
	if k != len(scores) || k < 25 {
		t.Fatalf("%d scores for %d predictions", len(scores), k)
	}
	if _, err := Replay(Options{}, []Observation{{Point: h[0].Point, True: math.NaN()}}); err == nil {
		t.Fatal("Replay took a true position that is not a number")
	}
}

func TestSummarise(t *testing.T) {
	// z of 0.5, −1.5, 2.5, 3.5: within 1σ one of four, within 2σ two, within 3σ three; the
	// median |z| is between 1.5 and 2.5.
	var s []Score
	for _, z := range []float64{0.5, -1.5, 2.5, 3.5} {
		s = append(s, Score{Z: z})
	}
	c := Summarise(s)
	if c.N != 4 || c.Within != [3]float64{0.25, 0.5, 0.75} || c.MedianAbsZ != 2 || c.MaxZ != 3.5 {
		t.Fatalf("Summarise = %+v", c)
	}
	if c := Summarise(nil); c.N != 0 {
		t.Fatalf("Summarise(nil) = %+v", c)
	}
}
