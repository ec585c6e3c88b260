package memmap

import (
	"math"
	"math/rand/v2"
	"sort"
	"time"

	"periph.io/x/conn/v3/physic"
)

// epoch is where every session's time starts: a fixed instant, so that runs are reproducible.
var epoch = time.Date(2026, time.January, 1, 0, 0, 0, 0, time.UTC)

// A synthetic loop to learn from. The resonance is Thomson's formula f = 1/(2π√(LC)) (common
// practice); the capacitor is either linear in shaft position or a tabulated law; the loop's
// inductance follows its temperature through the copper's expansion and wanders slowly besides.
// Values are those of a loop of about 1 m diameter in 11 mm tube, L ≈ 2.45 µH from
// μ0·R·(ln(8R/a) − 2) (the thin-ring formula, common practice), tuning 3.5–14.35 MHz with
// 20–900 pF (from memory of typical designs).

const (
	worldL0     = 2.45e-6 // H
	worldStray  = 10e-12  // F: stray capacitance of the loop and leads
	worldTravel = 50000.0 // steps of the capacitor's full travel
	worldCmin   = 15e-12  // F at position 0
	worldCmax   = 915e-12 // F at full travel
	copperTC    = 17e-6   // per kelvin, linear expansion of copper (from memory)
)

// capLaw is a capacitor: capacitance against position, monotone increasing.
type capLaw interface {
	C(p float64) float64
}

type linearCap struct{}

func (linearCap) C(p float64) float64 {
	return worldCmin + (worldCmax-worldCmin)*p/worldTravel
}

// tableCap is a tabulated law, interpolated by monotone cubic Hermite splines (the
// Fritsch–Carlson method, Fritsch & Carlson 1980, SIAM J. Numer. Anal. 17(2)).
type tableCap struct {
	p, c, m []float64
}

// newBentCap tabulates a near-linear capacitor with smooth random bends of about rms (as a
// fraction of its range) in 21 entries, as a measurement of a real capacitor would give.
func newBentCap(rng *rand.Rand, rms float64) *tableCap {
	const n = 21
	t := &tableCap{p: make([]float64, n), c: make([]float64, n), m: make([]float64, n)}
	var amp [3]float64
	var ph [3]float64
	for k := range amp {
		amp[k] = rms * math.Sqrt2 / math.Sqrt(3) * (0.5 + rng.Float64())
		ph[k] = 2 * math.Pi * rng.Float64()
	}
	for i := range n {
		x := float64(i) / (n - 1)
		bend := 0.0
		for k := range amp {
			bend += amp[k] * math.Sin(math.Pi*float64(k+1)*x+ph[k])
		}
		t.p[i] = x * worldTravel
		t.c[i] = worldCmin + (worldCmax-worldCmin)*(x+bend)
	}
	// Fritsch–Carlson slopes.
	d := make([]float64, n-1)
	for i := range n - 1 {
		d[i] = (t.c[i+1] - t.c[i]) / (t.p[i+1] - t.p[i])
	}
	t.m[0], t.m[n-1] = d[0], d[n-2]
	for i := 1; i < n-1; i++ {
		if d[i-1]*d[i] <= 0 {
			t.m[i] = 0
		} else {
			t.m[i] = (d[i-1] + d[i]) / 2
		}
	}
	for i := range n - 1 {
		if d[i] == 0 {
			t.m[i], t.m[i+1] = 0, 0
			continue
		}
		a, b := t.m[i]/d[i], t.m[i+1]/d[i]
		if s := a*a + b*b; s > 9 {
			tau := 3 / math.Sqrt(s)
			t.m[i], t.m[i+1] = tau*a*d[i], tau*b*d[i]
		}
	}
	return t
}

func (t *tableCap) C(p float64) float64 {
	n := len(t.p)
	i := sort.SearchFloat64s(t.p, p) - 1
	i = max(0, min(i, n-2))
	h := t.p[i+1] - t.p[i]
	s := (p - t.p[i]) / h
	h00 := (1 + 2*s) * (1 - s) * (1 - s)
	h10 := s * (1 - s) * (1 - s)
	h01 := s * s * (3 - 2*s)
	h11 := s * s * (s - 1)
	return h00*t.c[i] + h10*h*t.m[i] + h01*t.c[i+1] + h11*h*t.m[i+1]
}

// world is the loop at one moment: its capacitor, its inductance's fractional change from L0,
// and an offset of the position count (missed steps, slack).
type world struct {
	capa   capLaw
	deltaL float64
	offset float64
}

// truePos returns where the dip is at frequency f: the position whose capacitance, with the
// stray, resonates the loop there. Bisection: the law is monotone.
func (w *world) truePos(f physic.Frequency) float64 {
	hz := float64(f) / 1e6
	need := 1/(4*math.Pi*math.Pi*hz*hz*worldL0*(1+w.deltaL)) - worldStray
	lo, hi := -0.5*worldTravel, 1.5*worldTravel
	for range 100 {
		mid := (lo + hi) / 2
		if w.capa.C(mid) < need {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo+hi)/2 + w.offset
}

// trueSlope returns dPos/dFreq at f, in steps per hertz, by a central difference.
func (w *world) trueSlope(f physic.Frequency) float64 {
	d := f / 100000
	return (w.truePos(f+d) - w.truePos(f-d)) / (2 * float64(d) / 1e6)
}

// The bands the loop covers, in hertz, with a weight for how often each is used.
var worldBands = []struct {
	lo, hi float64
	weight float64
}{
	{3.5e6, 3.8e6, 2},
	{5.3e6, 5.4e6, 0.5},
	{7.0e6, 7.2e6, 3},
	{10.1e6, 10.15e6, 1},
	{14.0e6, 14.35e6, 2},
}

// randFreq draws a frequency in band b, on a 100 Hz grid.
func randFreq(rng *rand.Rand, b int) physic.Frequency {
	hz := worldBands[b].lo + rng.Float64()*(worldBands[b].hi-worldBands[b].lo)
	return physic.Frequency(math.Round(hz/100)*100) * physic.Hertz
}

func randBand(rng *rand.Rand) int {
	var sum float64
	for _, b := range worldBands {
		sum += b.weight
	}
	x := rng.Float64() * sum
	for i, b := range worldBands {
		if x -= b.weight; x < 0 {
			return i
		}
	}
	return len(worldBands) - 1
}

// session is a day or two of operating: the loop's temperature follows the sun, its
// inductance wanders on top of that, and the operator tunes now here, now there.
type session struct {
	rng     *rand.Rand
	at      time.Time // the session's clock
	w       world
	wanderL float64 // long-run 1-σ of the wander of deltaL
	wanderO float64 // long-run 1-σ of the wander of the offset, steps
	tempC   float64
	t0      time.Time
	noise   float64 // 1-σ of a tune's position error, steps
	band    int
}

func newSession(seed uint64, capa capLaw) *session {
	rng := rand.New(rand.NewPCG(seed, 0x5eed))
	return &session{
		rng:     rng,
		at:      epoch,
		w:       world{capa: capa},
		wanderL: DefaultDriftMax,
		wanderO: DefaultOffsetMax,
		noise:   1,
		t0:      epoch,
		band:    randBand(rng),
	}
}

// temperature returns the loop's temperature at t: 15 °C ± 8 °C over the day.
func (s *session) temperature(t time.Time) float64 {
	h := t.Sub(s.t0).Hours()
	return 15 + 8*math.Sin(2*math.Pi*(h-9)/24)
}

// wanderHours is the time constant over which the loop's wander forgets where it was: the
// wander is an Ornstein–Uhlenbeck process, a random walk over short spans that stays bounded in
// the long run, as the drift of a real loop does. It matches the map's default half-life.
var wanderHours = DefaultDriftHalfLife.Hours() / math.Ln2

// skip moves the session's clock on by d; a negative d is ignored (time never runs backwards).
func (s *session) skip(d time.Duration) {
	if d > 0 {
		s.at = s.at.Add(d)
	}
}

// advance moves time on by d and lets the loop wander accordingly.
func (s *session) advance(d time.Duration) {
	s.skip(d)
	// The exact discretisation of the Ornstein–Uhlenbeck process: decay, then the variance
	// that the decay leaves room for.
	a := math.Exp(-d.Hours() / wanderHours)
	spread := math.Sqrt(1 - a*a)
	// deltaL here is the wander alone; now adds the thermal part.
	s.w.deltaL = a*s.w.deltaL + s.wanderL*spread*s.rng.NormFloat64()
	s.w.offset = a*s.w.offset + s.wanderO*spread*s.rng.NormFloat64()
}

// now returns the loop as it is at the current time, with its temperature.
func (s *session) now() (world, float64) {
	t := s.temperature(s.at)
	w := s.w
	w.deltaL += copperTC * (t - s.temperature(s.t0))
	return w, t
}

// nextTune waits a while, perhaps changes band, and returns the next frequency to tune.
func (s *session) nextTune() physic.Frequency {
	var d time.Duration
	switch x := s.rng.Float64(); {
	case x < 0.6:
		d = time.Duration(1+s.rng.IntN(10)) * time.Minute
	case x < 0.9:
		d = time.Duration(10+s.rng.IntN(110)) * time.Minute
	default:
		d = time.Duration(2+s.rng.IntN(10)) * time.Hour
	}
	s.advance(d)
	if s.rng.Float64() < 0.25 {
		s.band = randBand(s.rng)
	}
	return randFreq(s.rng, s.band)
}

// tune returns the point a tune at f finds now: the true dip plus the tune's error, with the
// temperature as a sensor reads it (to 0.25 °C).
func (s *session) tune(f physic.Frequency) (Point, float64) {
	w, tc := s.now()
	truth := w.truePos(f)
	pos := math.Round(truth + s.noise*s.rng.NormFloat64())
	temp := physic.ZeroCelsius + physic.Temperature(math.Round((tc+0.25*s.rng.NormFloat64())*1e9))
	return Point{
		Freq: f, Pos: pos2steps(pos), At: s.at,
		Temp: temp, HasTemp: true, SWR: 1.1, Q: 400,
	}, truth
}

func pos2steps(p float64) int64 { return int64(math.Round(p)) }

// physicsPrior is a Prior built from the loop's design values with the inductance known only to
// within a few per cent, the capacitor taken as linear, and an honest Sigma for that: the
// position error of a fractional error δ of L·C is about δ times the position-equivalent of the
// capacitance.
type physicsPrior struct {
	errL   float64 // the prior's fractional error of L
	sigmaL float64 // the 1-σ it admits to
}

func (p physicsPrior) Predict(f physic.Frequency) (Prediction, bool) {
	hz := float64(f) / 1e6
	k := (worldCmax - worldCmin) / worldTravel
	cTot := 1 / (4 * math.Pi * math.Pi * hz * hz * worldL0 * (1 + p.errL))
	pos := (cTot - worldStray - worldCmin) / k
	if pos < -0.1*worldTravel || pos > 1.1*worldTravel {
		return Prediction{}, false
	}
	return Prediction{
		Pos:   pos,
		Sigma: math.Hypot(p.sigmaL*cTot/k, 0.005*worldTravel),
		Slope: -2 * cTot / (k * hz),
	}, true
}
