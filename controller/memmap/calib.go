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
//   - cShape scales Bend², the variance of the law's deviation from the global model, before
//     the learned points' own scatter is pooled with it (fit.go); as the evidence demands of a
//     scale it is computed for, near the points and far from them alike. It learns only from
//     errors made far from the learned points, in proportion to how far (outcome.far): a band
//     tuned for the first time, predicted from the others, where the law is nearly the whole of
//     σ. Beside a point, the law's part of σ is what the guessed Reach leaves unknown over a
//     short distance, and an error there tests how smooth the law is over that distance, not
//     how far it bends between bands: a tabulated capacitor may be smooth over the one and bend
//     by all of Bend over the other. (Lengthening Reach by the errors instead, as this map once
//     did, left the law's variance between bands at the guess whatever the errors showed, and
//     that guess the largest part of σ beyond a band's points.)
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
// The guess enters the scale as ν·1 beside the evidence, so the scale cannot fall below
// ν/(ν + w), w the source's summed shares, whatever the errors show. The guesses are generous
// by design (a σ too small costs a missed sweep, one too large only time), and on a loop that
// is better than they say the map should tighten within the few tunes of a first session, not
// after dozens.
//
// The drift and the noise share every error with the others, a third to a half each, so that a
// first session's six to ten tunes give each of them a w of only two to four: at a weight of a
// tenth the guess alone kept their scale above 0.03–0.05, a variance still about twice what
// the errors showed. Three hundredths leave that bound below what a session's errors can
// measure, and still keep one lucky error from carrying a source far: an error of 0.1σ (one
// time in twelve, standard normal tables) with half the variance brings the scale to
// (0.03 + 0.005)/0.53, a σ a quarter of the guess, and a scale that fell too far shows at the
// next tune, whose error is then large in its own σ, and comes back.
//
// Three tenths for the law: its evidence comes about one error per band tuned for the first
// time, and the bends of a tabulated capacitor between bands are what a map learned in two or
// three bands knows least. One such error, however small, leaves at least a quarter of the
// guessed variance (0.3/1.3), two about a seventh, so that a stretch or two that happened to
// be straight do not vouch for the next one.
//
// One for the prior: its σ is the station description's stated tolerance, a considered figure
// rather than a guess of the map's, and the map has one bare-prior error to judge it by (the
// first tune's) before it anchors to the learned points; that error can at most halve its
// variance.
var calibWeight = [nComp]float64{cShape: 0.3, cEps: 0.03, cOff: 0.03, cNoise: 0.03, cPrior: 1}

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

// fade ages the evidence of the drift by the decay factor a of the time since the last tune.
func (c *calib) fade(a float64) {
	for _, k := range [2]int{cEps, cOff} {
		c.w[k] *= a
		c.s[k] *= a
	}
}

// note adds the evidence of an error r of a prediction whose variance, with the new tune's own
// position variance, was the sum of parts, source by source. Each source learns from it in
// proportion to its share and to use[k], from 0 (not at all) to 1.
func (c *calib) note(r float64, parts *[nComp]float64, use [nComp]float64) {
	var s float64
	for _, v := range parts {
		s += v
	}
	if !(s > 0) || !finite(r) {
		return
	}
	z2 := math.Min(r*r/s, calibClip)
	for k, v := range parts {
		if !(use[k] > 0) || !(v > 0) {
			continue
		}
		a, l := use[k]*v/s, c.scale(k)
		keep := 1 - a/calibMemory
		if k == cEps || k == cOff {
			keep = 1 // these fade with time instead
		}
		c.w[k] = keep*c.w[k] + a
		c.s[k] = keep*c.s[k] + a*l*z2
	}
}
