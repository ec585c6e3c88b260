package memmap

import (
	"errors"
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"
)

// Options tune a Map. The zero value of every field selects the default given beside it. Where
// zero would be a meaningful setting of its own ("no forgetting", "no offset drift"), a negative
// value selects it.
//
// PosNoise, Bend, DriftMax, OffsetMax and the Prior's Sigma are where the map's σ
// starts: as tunes come in, the map scales each by what its own errors show (see "An honest σ"
// in the package documentation), so a guess on the safe side costs only the first few tunes.
type Options struct {
	// Prior predicts from a physics model while the map has fewer than two points, and wherever
	// the prior, anchored to the nearest learned point, has been more right than the map. nil:
	// none, and the map predicts nothing until it has two points.
	Prior Prior

	// MaxPoints bounds the map. When it is full, the point in the most densely learned stretch
	// goes (the older one on a tie). Default 512; at least 2.
	MaxPoints int
	// MergeWithin is how close in frequency a new point must be to an existing one to replace it
	// (the newer wins). Default 1 kHz; negative: only a point at the very same frequency is
	// replaced.
	MergeWithin physic.Frequency

	// PosNoise is the 1-σ error of a learned position, in steps: how exactly a tune finds the
	// dip. Default 1.
	PosNoise float64
	// Bend is the typical (1-σ) deviation of the capacitor's law from the global model, in steps,
	// assumed until the map's own scatter and errors tell better (its errors scale it, as they
	// do the other guesses). Default: 0.5 % of the position-equivalent of the largest capacitance
	// the map spans. Set it from a measurement of the capacitor if the law is known to be far
	// from straight.
	Bend float64
	// Reach is how far, in steps, a local deviation from the global model carries to the
	// neighbouring positions (the correlation length). Default: a tenth of the
	// position-equivalent of the largest capacitance the map spans.
	Reach float64
	// QuadMinPoints is how many points the map needs, spread over a frequency ratio of at least
	// √2, before the global model gets its quadratic term; points close enough to share one local
	// deviation (within Reach) count about once together. Default 6, at least 4; negative: the
	// global model stays a straight line.
	QuadMinPoints int

	// DriftHalfLife is the memory of the drift estimate: with no tunes, the estimate relaxes
	// halfway back to the map's reference state in this time, and evidence older than a few
	// half-lives no longer counts. It is also the time scale on which the loop's wander is
	// taken to forget where it was. Default 24 h.
	DriftHalfLife time.Duration
	// DriftMax is the 1-σ of the fractional slope change ε that the loop wanders through in the
	// long run, on top of what its temperature explains. Over spans shorter than DriftHalfLife the
	// wander is close to a random walk of DriftMax·√(2·ln 2/DriftHalfLife). Default 5e-4.
	DriftMax float64
	// TempCoeff is the 1-σ prior of ε's temperature coefficient, per kelvin. The copper of the
	// loop alone expands by some 17 ppm/K. Default 5e-5; negative: temperatures are not used.
	TempCoeff float64
	// OffsetMax is the 1-σ of a plain position offset (stray capacitance, mechanics) that the
	// loop wanders through in the long run, in steps, on the same time scale. Default 5;
	// negative: no offset is tracked.
	OffsetMax float64

	// PriorReach is how far, in natural-log frequency units, the prior's error stays the same
	// when the prior is anchored to a learned point; beyond it the anchor helps little. Default
	// 0.5 (a frequency ratio of about 1.65).
	PriorReach float64
}

// The defaults of Options.
const (
	DefaultMaxPoints     = 512
	DefaultMergeWithin   = physic.KiloHertz
	DefaultPosNoise      = 1.0
	DefaultQuadMinPoints = 6
	DefaultDriftHalfLife = 24 * time.Hour
	DefaultDriftMax      = 5e-4
	DefaultTempCoeff     = 5e-5
	DefaultOffsetMax     = 5.0
	DefaultPriorReach    = 0.5

	// defaultBendShare and defaultReachShare scale the automatic Bend and Reach from the
	// position-equivalent of the largest capacitance the map spans.
	defaultBendShare  = 0.005
	defaultReachShare = 0.1
)

// resolved holds the options as the map uses them: defaults filled in, "none" as zero, spreads
// squared into variances.
type resolved struct {
	prior         Prior
	maxPoints     int
	mergeWithin   physic.Frequency // < 0: exact frequency only
	posVar        float64          // steps²
	bend, reach   float64          // steps, 0: automatic
	quadMin       int              // 0: never
	halfLife      float64          // hours
	capEps        float64          // variance
	capKappa      float64          // variance, 0: temperatures unused
	capOff        float64          // variance, 0: no offset
	priorReachSq2 float64          // 2·PriorReach²
}

// resolve checks every field and reports all bad ones at once.
func (o Options) resolve() (resolved, error) {
	var errs []error
	bad := func(name, want string, got any) {
		errs = append(errs, fmt.Errorf("%s must be %s, got %v", name, want, got))
	}
	finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	// orDefault maps 0 to def and a negative value to 0.
	orDefault := func(name string, v, def float64) float64 {
		switch {
		case !finite(v):
			bad(name, "a finite number", v)
			return 0
		case v == 0:
			return def
		case v < 0:
			return 0
		}
		return v
	}
	r := resolved{prior: o.Prior}

	switch {
	case o.MaxPoints == 0:
		r.maxPoints = DefaultMaxPoints
	case o.MaxPoints < 2:
		bad("MaxPoints", "at least 2 (or 0 for the default)", o.MaxPoints)
	default:
		r.maxPoints = o.MaxPoints
	}
	r.mergeWithin = o.MergeWithin
	if o.MergeWithin == 0 {
		r.mergeWithin = DefaultMergeWithin
	}

	switch {
	case o.PosNoise == 0:
		r.posVar = DefaultPosNoise * DefaultPosNoise
	case !finite(o.PosNoise) || o.PosNoise < 1e-3:
		bad("PosNoise", "a finite number of steps, at least 0.001", o.PosNoise)
	default:
		r.posVar = o.PosNoise * o.PosNoise
	}
	if !finite(o.Bend) || o.Bend < 0 {
		bad("Bend", "a finite number of steps ≥ 0", o.Bend)
	}
	r.bend = o.Bend
	if !finite(o.Reach) || o.Reach < 0 {
		bad("Reach", "a finite number of steps ≥ 0", o.Reach)
	}
	r.reach = o.Reach
	switch {
	case o.QuadMinPoints == 0:
		r.quadMin = DefaultQuadMinPoints
	case o.QuadMinPoints < 0:
		r.quadMin = 0
	case o.QuadMinPoints < 4:
		bad("QuadMinPoints", "at least 4, or negative for none", o.QuadMinPoints)
	default:
		r.quadMin = o.QuadMinPoints
	}

	switch {
	case o.DriftHalfLife == 0:
		r.halfLife = DefaultDriftHalfLife.Hours()
	case o.DriftHalfLife < time.Minute:
		bad("DriftHalfLife", "at least a minute", o.DriftHalfLife)
	default:
		r.halfLife = o.DriftHalfLife.Hours()
	}
	switch {
	case o.DriftMax == 0:
		r.capEps = DefaultDriftMax * DefaultDriftMax
	case !finite(o.DriftMax) || o.DriftMax < 0 || o.DriftMax > 0.1:
		bad("DriftMax", "a fraction in (0, 0.1]", o.DriftMax)
	default:
		r.capEps = o.DriftMax * o.DriftMax
	}
	k := orDefault("TempCoeff", o.TempCoeff, DefaultTempCoeff)
	if k > 0.01 {
		bad("TempCoeff", "at most 0.01 per kelvin", o.TempCoeff)
	}
	r.capKappa = k * k
	m := orDefault("OffsetMax", o.OffsetMax, DefaultOffsetMax)
	r.capOff = m * m
	switch {
	case o.PriorReach == 0:
		r.priorReachSq2 = 2 * DefaultPriorReach * DefaultPriorReach
	case !finite(o.PriorReach) || o.PriorReach < 0:
		bad("PriorReach", "a finite number > 0", o.PriorReach)
	default:
		r.priorReachSq2 = 2 * o.PriorReach * o.PriorReach
	}
	if len(errs) > 0 {
		return resolved{}, fmt.Errorf("memmap: options: %w", errors.Join(errs...))
	}
	return r, nil
}
