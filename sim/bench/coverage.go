package bench

import (
	"math"
	"sort"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
)

// Where a tune's frequency lay against the map's learned points (Prediction.Extent).
const (
	ExtentBetween = "between" // within the span of the learned points' frequencies
	ExtentBeyond  = "beyond"  // outside it: the map extrapolates
	ExtentNone    = "none"    // nothing learned yet: the prior alone
)

// Prediction is the map's prediction a tune started from, against the truth.
type Prediction struct {
	Source string  `json:"source"`   // memmap's: "map", "anchored-prior", "prior"
	Extent string  `json:"extent"`   // ExtentBetween, ExtentBeyond or ExtentNone
	Pos    float64 `json:"position"` // predicted, steps, final-approach coordinates
	Sigma  float64 `json:"sigma"`    // its 1-σ, steps
	Best   float64 `json:"best"`     // the true best position then, in the controller's frame
	// ErrorSigmas is |Best − Pos|/Sigma: how many of its own σ the prediction was off.
	ErrorSigmas float64 `json:"error_sigmas"`
}

// predictionProbe catches the measured tune's prediction and what is needed to place the
// truth in the controller's frame at that instant. It reads the rig (positions, the map's
// points) but asks the simulator nothing that could change its answers later.
type predictionProbe struct {
	on     bool
	seen   bool
	pred   tune.Prediction
	at     time.Time
	offset motion.Steps // the axis's count less the motor's true position
	extent string
}

func (p *predictionProbe) observe(r *Rig, e tune.Event) {
	if !p.on || e.Prediction == nil {
		return
	}
	p.seen, p.pred, p.at = true, *e.Prediction, e.At
	p.offset = r.Axis.Position() - r.Station.Mech.MotorPosition()
	p.extent = extentOf(r.Map.Points(), e.Freq)
}

// extentOf says where f lies against the learned points (sorted by frequency, as
// memmap.Map.Points returns them).
func extentOf(pts []memmap.Point, f physic.Frequency) string {
	switch {
	case len(pts) == 0:
		return ExtentNone
	case f >= pts[0].Freq && f <= pts[len(pts)-1].Freq:
		return ExtentBetween
	}
	return ExtentBeyond
}

// prediction is the caught prediction against the truth at its instant; nil if the tune made
// none with a σ.
func (p *predictionProbe) prediction(sc Scenario, tr *truth) (*Prediction, error) {
	if !p.seen || p.pred.Source == tune.SourceNone || !(p.pred.Sigma > 0) {
		return nil, nil
	}
	best, _, err := tr.best(Hz(sc.Freq), p.at)
	if err != nil {
		return nil, err
	}
	b := float64(best + p.offset)
	return &Prediction{Source: p.pred.Source, Extent: p.extent, Pos: p.pred.Pos, Sigma: p.pred.Sigma, Best: b,
		ErrorSigmas: math.Abs(b-p.pred.Pos) / p.pred.Sigma}, nil
}

// Coverage is how often the map's σ held: of N predictions, the shares whose error was within
// one, two and three σ, and the median error in σ. For an honest σ of a normal error they are
// NormalCoverage's: 68.3 %, 95.4 %, 99.7 % and 0.674.
type Coverage struct {
	N                 int     `json:"n"`
	Within1           float64 `json:"within_1_sigma"`
	Within2           float64 `json:"within_2_sigma"`
	Within3           float64 `json:"within_3_sigma"`
	MedianErrorSigmas float64 `json:"median_error_sigmas"`
}

// NormalCoverage is Coverage for a normal error with an honest σ: P(|Z| ≤ k) = erf(k/√2), and
// the median of |Z|, √2·erf⁻¹(½) (textbook).
func NormalCoverage() Coverage {
	w := func(k float64) float64 { return math.Erf(k / math.Sqrt2) }
	return Coverage{Within1: w(1), Within2: w(2), Within3: w(3), MedianErrorSigmas: math.Sqrt2 * math.Erfinv(0.5)}
}

// coverageOf is the coverage of errors in σ.
func coverageOf(errs []float64) Coverage {
	c := Coverage{N: len(errs)}
	if c.N == 0 {
		return c
	}
	var n1, n2, n3 int
	for _, e := range errs {
		if e <= 1 {
			n1++
		}
		if e <= 2 {
			n2++
		}
		if e <= 3 {
			n3++
		}
	}
	n := float64(c.N)
	c.Within1, c.Within2, c.Within3 = float64(n1)/n, float64(n2)/n, float64(n3)/n
	c.MedianErrorSigmas = quantile(errs, 0.5)
	return c
}

// CoverageReport is the map's σ coverage over tankd's tunes that started from a prediction with
// a σ (pre-positioned or not): over all of them, by the prediction's source (memmap's
// "map", "anchored-prior", "prior") and by where the frequency lay against the learned points
// (ExtentBetween, ExtentBeyond, ExtentNone).
type CoverageReport struct {
	All      Coverage            `json:"all"`
	BySource map[string]Coverage `json:"by_source"`
	ByExtent map[string]Coverage `json:"by_extent"`
}

// coverageReport gathers tankd's cases' predictions.
func coverageReport(cases []Case) CoverageReport {
	var all []float64
	bySource, byExtent := map[string][]float64{}, map[string][]float64{}
	for _, c := range cases {
		p := c.Prediction
		if c.Strategy != Tankd || p == nil {
			continue
		}
		all = append(all, p.ErrorSigmas)
		bySource[p.Source] = append(bySource[p.Source], p.ErrorSigmas)
		byExtent[p.Extent] = append(byExtent[p.Extent], p.ErrorSigmas)
	}
	rep := CoverageReport{All: coverageOf(all), BySource: map[string]Coverage{}, ByExtent: map[string]Coverage{}}
	for k, v := range bySource {
		rep.BySource[k] = coverageOf(v)
	}
	for k, v := range byExtent {
		rep.ByExtent[k] = coverageOf(v)
	}
	return rep
}

// sortedKeys returns a map's keys in order.
func sortedKeys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}
