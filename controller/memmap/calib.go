package memmap

import "math"

// A prediction's σ adds up the variances of several sources of error, each sized by an option
// that is a guess about a loop nobody has measured yet: how far the capacitor's law strays
// between the learned points (Bend over Reach), how much the loop wanders beyond what its
// temperature explains (DriftMax, OffsetMax), how exactly a tune finds the dip (PosNoise), how
// far the physics prior may be off (its own Sigma). A loop may be much better than the guesses,
// or worse. Every tune tells which: before a point is learned the map predicts it, and the
// prediction's error against what the tune found measures the map's accuracy. The map keeps,
// for each source, the evidence of those errors, and scales the source's variance by what they
// show (calib.scale).
//
// The estimate is the one of expectation-maximisation for a Gaussian error whose variance is a
// sum of parts (Dempster, Laird & Rubin 1977), as innovation-based adaptive Kalman filters use it
// (Mehra 1970): an error r of predicted variance s, of which source k contributed v, says that
// the source's variance is λ·r²/s times what it should be (λ its present scale), with the
// weight of its share v/s: an error tells most about the source that dominated it. The scale
// is the weighted mean of that evidence, pulled towards 1, the option's guess, by calibWeight
// errors' worth of weight. So a map of few tunes stays near the guesses, and the evidence takes
// over as tunes come in.
//
// The map's own fit and the prior anchored to a learned point are both scored at every tune,
// whichever was used, so each has a record of its errors; predict chooses between them by their
// σ as those records have calibrated them and, near the learned points, by how well each
// predicts those points left out: the one that has been right.
//
// Where each scale acts:
//   - cShape lengthens Reach (at most calibReachGrowth times): errors near the points show how
//     smooth the law is over the short distances they test; they say nothing of the bends
//     between bands, so Bend, the law's spread far from every point, stays as guessed.
//   - cNoise scales PosNoise's variance, everywhere the map uses it.
//   - cPrior scales the prior's variance, bare or anchored.
//   - cEps and cOff scale the part of a prediction's σ that the drift of ε and of the offset
//     give. The drift filter itself runs on the options' model: it has carried their
//     covariances through every tune and cannot rescale them after the fact. Their evidence
//     fades with DriftHalfLife, as the drift estimate's own memory does, so that after a long
//     pause the map trusts the guessed wander again rather than what a day of tuning long ago
//     showed.

// The sources of error whose size the map learns.
const (
	cShape = iota // the capacitor's law between and beyond the learned points
	cEps          // the drift of the slope change ε
	cOff          // the drift of the plain offset
	cNoise        // a tune's own position error
	cPrior        // the physics prior's error
	nComp
)

// calibWeight is how many fully informative errors' worth of weight the options' guess of each
// source keeps.
//
// A tenth for the map's own sources: the guesses are generous by design (a σ too small costs a
// missed sweep, one too large only time), and on a loop that is better than they say the map
// should tighten within the few tunes of a first session, not after dozens. An error is
// informative about a source in proportion to its share, so a single lucky error (below 0.1σ
// one time in twelve, standard normal tables) rarely carries a whole share; and a scale that
// fell too far shows at the next tune, whose error is then large in its own σ, and comes back.
//
// One for the prior: its σ is the station description's stated tolerance, a considered figure
// rather than a guess of the map's, and the map has one bare-prior error to judge it by (the
// first tune's) before it anchors to the learned points; that error can at most halve its
// variance.
var calibWeight = [nComp]float64{cShape: 0.1, cEps: 0.1, cOff: 0.1, cNoise: 0.1, cPrior: 1}

const (
	// calibMemory is over how many errors of full weight the evidence of the sources that do
	// not fade with time (the law, the noise, the prior) is kept, older evidence fading
	// geometrically: months of tuning at a few tunes a day, so that a loop that changes (a new
	// capacitor, a move) is relearned, and long enough that the scales do not follow the luck of
	// the last few tunes.
	calibMemory = 200
	// calibClip bounds the squared error, in predicted variances, that one tune may bring as
	// evidence (4σ, the drift filter's innovationClip): a tune after lost steps or on a wrong
	// dip says little about the map's accuracy, and must not blow every window up for weeks.
	calibClip = innovationClip * innovationClip
	// calibFloor is the least scale of a variance: a tenth of the σ guessed. A source far
	// smaller than its guess no longer matters beside the others, and the floor keeps its
	// estimate from running towards zero on errors that another source explains.
	calibFloor = 0.01
	// calibReachGrowth is the most the map's errors may lengthen Reach. Errors beside the
	// learned points test the law over a fraction of Reach; beyond the distances they test, a
	// longer reach would trust the points' deviations over stretches nobody has checked
	// (between bands), where a tabulated capacitor bends. Twice the guess (a variance a
	// quarter of it at the same distance) takes most of the gain where the law is straight.
	calibReachGrowth = 2
)

// calib is the evidence of the map's past errors, source by source.
type calib struct {
	// w is the sum of the shares each source had in the errors' predicted variance; s the sum
	// of the shares times the evidence λ·r²/s.
	w, s [nComp]float64
}

// scale returns the factor by which the variance of source k is taken to differ from the
// options' guess.
func (c *calib) scale(k int) float64 { return c.scaleAt(k, 1) }

// scaleAt is scale for a prediction at a time whose decay factor (drift.go) from the latest
// tune is a: the evidence of the drift fades with it.
func (c *calib) scaleAt(k int, a float64) float64 {
	if k != cEps && k != cOff {
		a = 1
	}
	nu := calibWeight[k]
	return math.Max((nu+a*c.s[k])/(nu+a*c.w[k]), calibFloor)
}

// reachFactor is how much longer than guessed the law's deviations carry (cShape).
func (c *calib) reachFactor() float64 {
	return math.Min(1/math.Sqrt(c.scale(cShape)), calibReachGrowth)
}

// fade ages the evidence of the drift by the decay factor a of the time since the last tune.
func (c *calib) fade(a float64) {
	for _, k := range [2]int{cEps, cOff} {
		c.w[k] *= a
		c.s[k] *= a
	}
}

// note adds the evidence of an error r of a prediction whose variance, with the new tune's own
// position variance, was the sum of parts, source by source. Only the sources marked in use
// learn from it.
func (c *calib) note(r float64, parts *[nComp]float64, use [nComp]bool) {
	var s float64
	for _, v := range parts {
		s += v
	}
	if !(s > 0) || !finite(r) {
		return
	}
	z2 := math.Min(r*r/s, calibClip)
	for k, v := range parts {
		if !use[k] || !(v > 0) {
			continue
		}
		a, l := v/s, c.scale(k)
		keep := 1 - a/calibMemory
		if k == cEps || k == cOff {
			keep = 1 // these fade with time instead
		}
		c.w[k] = keep*c.w[k] + a
		c.s[k] = keep*c.s[k] + a*l*z2
	}
}
