package tune

import (
	"math"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

// params are the numbers that tune the search, each with its reason. They are not Options: an
// operator has nothing to go on to change them, and most only make sense together. Widths are
// in units of the dip's expected half-power half-width w, steps in motor steps, shares of |Γ|²
// or of the absorbed share 1 − |Γ|² as fractions. A value called a judgement was chosen by
// hand, not measured; the benchmark (tanksim bench) shows what changing one does.
type params struct {
	noise  noiseParams
	scan   scanParams
	sweep  sweepParams
	fit    fitParams
	verify verifyParams
	learn  learnParams
	play   playParams
	motion motionParams
	rf     rfParams
}

// noiseParams size the reading-noise measurement made before each search.
type noiseParams struct {
	// readings taken with the motor still: eight give the standard deviation to within about a
	// quarter (its relative standard error is 1/√(2(n−1))), for 8 reading times of carrier.
	readings int
	// fewReadings are taken instead where an earlier measurement near the same |Γ|² can be
	// pooled with them (the coupler and its converter stay the same from tune to tune): three
	// add enough to notice a change, at well under half the carrier (a judgement).
	fewReadings int
	// memoryWeight is the most degrees of freedom an earlier measurement brings to the pool:
	// seven, those of a full measurement, so that the estimate never rests more on the past
	// than a full fresh measurement would (a judgement).
	memoryWeight int
	// memoryAge: an earlier measurement older than this is not pooled; a converter's noise
	// follows its temperature and whatever shares its supply (a judgement).
	memoryAge time.Duration
	// change: the factor by which the noise may have grown since an earlier measurement that
	// still counts (interference comes and goes); where even that much noise would not change
	// the sweep, no new measurement is made (noiseKnown). Two: a doubled noise is already a
	// disturbance an operator would notice (a judgement).
	change float64
	// poolLevels: an earlier measurement is pooled only if made at a |Γ|² within this factor
	// (as a natural log: a factor of two) of the new one; noise on the dip and off it differ.
	poolLevels float64
	// clippedRel and clippedAbs are the noise assumed where the readings could not show it
	// (they read full reflection, clipped: a coupler's leakage can add to the reflection off
	// the dip) and no earlier measurement stands in: the noisiest coupler the tuner is meant for,
	// some four times the demo station's 0.7 % (the benchmark's range), so that the sweep is
	// sized on the safe side and the fit is not judged against a noise it cannot have.
	clippedRel float64
	clippedAbs float64
	// minCarried is the fewest of them that must have seen a carrier: a standard deviation of
	// fewer than three readings says nothing.
	minCarried int
	// relFloor and absFloor keep the measured relative (of ln |Γ|²) and absolute (of |Γ|²)
	// noise from coming out as zero: a handful of readings on a quantised converter can come
	// out alike by chance. 0.002 is about 0.01 dB; 2e-4 about one count of a 12-bit converter
	// at full scale (from memory).
	relFloor float64
	absFloor float64
	// logFloor keeps ln |Γ|² finite on a perfect match (−60 dB: below any real coupler's
	// directivity).
	logFloor float64
	// offDipGamma2: a noise measurement whose mean |Γ|² is above this was taken off the dip,
	// and its mean is the coupler's own off-dip reading. Any dip worth tuning reads well below
	// 0.6 at its bottom; off the dip the leakage moves |Γ|² only a few per cent from one.
	offDipGamma2 float64
	// flankGamma2 is the |Γ|² on the dip's flanks, where the fit gets most of its information
	// about the centre: a deep dip's |Γ|² is steepest against position near 0.25 (a
	// Lorentzian's x²/(1+x²) at x = 1/√3; 0.3 is a judgement for dips that do not reach
	// zero). The noise there sizes the fine sweep.
	flankGamma2 float64
}

// scanParams shape the coarse scan for the dip.
type scanParams struct {
	// minSpacing is the least distance between readings, steps: the scan only has to find
	// the dip, which the fine sweep then places, so a scan finer than a step would only be
	// slower (a judgement).
	minSpacing float64
	// minThreshold is the least rise in the absorbed share that counts as a dip, however quiet
	// the readings: a coupler's leakage and a cable's ripple move |Γ|² off the dip by a few per
	// cent, and every dip worth tuning absorbs far more than 12 %.
	minThreshold float64
	// maxThreshold is the highest threshold an averaged reading must be able to clear: a tuned
	// loop absorbs most of the power at its dip, so a rise of 0.45 in the absorbed share is
	// well inside every dip worth the name.
	maxThreshold float64
	// sigmas is how many standard deviations of the averaged noise a rise must be to count:
	// five give a false alarm in some 10⁶ readings, and a false alarm only costs a fine sweep
	// that finds nothing there.
	sigmas float64
	// maxAveraging is the most readings a scan averages for one point (a judgement: sixteen
	// already slow the scan sixteenfold).
	maxAveraging int
	// windowSigmas and windowWidths size the first scan window around a trusted prediction:
	// ±(3σ + 3w) holds the dip 99.7 % of the time if σ is honest, with room for the dip's own
	// width.
	windowSigmas float64
	windowWidths float64
	// startSigmas: a scan from outside the window begins this many σ (and windowWidths w) short
	// of the prediction, the rest of the window scanned after where the dip was not ahead. One:
	// a normal error lies beyond it on that side one time in six (fewer with the prior's σ, which
	// is drawn wide), and the rescan that costs then is outweighed by the σ or two not scanned
	// slowly on every other tune (a judgement, weighed on the bench's cold runs: mean, median
	// and 95th percentile all fall against two or three).
	startSigmas float64
	// growth: a window that holds no dip grows to growth times its half-width plus one w,
	// around the same centre (threefold: the next window is mostly new ground, and the whole
	// travel is reached in a few steps).
	growth float64
	// hitSlack, steps, is added to a hit's uncertainty besides the scan's spacing and the
	// backlash's, for the placement of readings between polls (a judgement).
	hitSlack float64
	// hitReadings is how many readings above the threshold make a dip: a single noise spike is
	// not one.
	hitReadings int
	// hitSpanWidths: those readings must lie within this many w (plus one reading spacing) of
	// each other: a deep dip absorbs more than the least threshold over about ±2.7w (where a
	// Lorentzian's 1/(1+x²) falls to 0.12), so two readings 4w apart can be one dip.
	hitSpanWidths float64
	// passedFactor and passedWidths say that a dip has clearly been passed, so the scan can
	// stop: the absorbed share has fallen below 1/passedFactor of its peak, passedWidths·w
	// beyond it (a Lorentzian is at a fifth of its peak 2w off the centre, so a third is
	// reached there even with some noise).
	passedFactor float64
	passedWidths float64
	// falseHits is the most hits the fine sweep may prove false before the search gives up:
	// five is far beyond what the false-alarm rate should give, and each costs a fine sweep (a
	// judgement).
	falseHits int
	// rejectWidths: a false hit's spot, ±this many w, is skipped by the rest of the scan (only
	// the spot: the fine sweep may have missed a real dip nearby by a backlash guess).
	rejectWidths float64
	// baselineReadings is how many averaged readings the running median of the off-dip level
	// spans: thirty-two, several times the few a dip holds at the scan's density, so that they
	// cannot move it (a judgement).
	baselineReadings int
	// baselineWarmup: until this many, the median falls back to the previous baseline.
	baselineWarmup int
	// baselineKeep: a segment whose median spans more than this many readings leaves its
	// median as the baseline for the next segments and sweeps.
	baselineKeep int
	// inDipShare: averaged readings below this share of the running baseline are well inside
	// a dip and are left out of it (a scan that starts on the dip would take it for the level).
	inDipShare float64
	// holeWidths and holeSpacings: readings further apart than holeWidths·w, and than
	// holeSpacings times the scan's own spacing, leave a stretch that may hide a dip (late
	// readings on a busy computer). A dip deep enough to tune to an SWR of 2 (absorbing 0.89
	// of the power) stays above minThreshold over ±2.6w: a gap of 2.5w can leave a single
	// reading on it, short of hitReadings; shorter gaps are common on a loaded board and
	// harmless. Two spacings keep a scan whose spacing is set by minSpacing from flagging every
	// gap.
	holeWidths   float64
	holeSpacings float64
	// holeRounds is how many times the stretches a scan skipped are scanned again before the
	// window grows (a rescan can skip again).
	holeRounds int
	// calibratedUncertainty, steps, is how far a position found scanning downward may be off
	// once a calibration has measured the play: the measurement's own repeatability (a
	// judgement).
	calibratedUncertainty float64
}

// sweepParams shape the fine sweep through the dip and the judging of its fit.
type sweepParams struct {
	// marginWidths: the sweep covers the dip's uncertainty and this many w beyond each end of
	// it, so that the fit sees both flanks down to about a quarter of the peak absorption (a
	// Lorentzian's 1/(1+1.8²)), where they are still steep enough to place it; further out they
	// add little to the centre and cost a sweep that much longer.
	marginWidths float64
	// directSigmas, directSlack (steps) and directWidths decide whether a prediction is good
	// enough to skip the coarse scan: 3σ + 1 step within 4w (a judgement: a wider window makes
	// the slow sweep long enough that a quick scan first pays).
	directSigmas float64
	directSlack  float64
	directWidths float64
	// centreFactor is the constant of σ_c ≈ centreFactor·w·σ/√N, the standard error of the
	// fitted centre from N readings within ±w with relative noise σ (measured on simulated
	// sweeps; see the fit tests).
	centreFactor float64
	// swrBudget is the SWR a placement error may cost: half of the 0.1 by which a tune may
	// fall short of the best achievable SWR (common practice for "in tune", and the benchmark's
	// success tolerance), the other half left to rounding to a whole step and to the verify. An
	// error δ costs about 2δ/w at a perfect match (less where the match is not perfect), so
	// the budget allows δ = swrBudget·w/2 ...
	swrBudget float64
	// ... and centreSigmas: the centre's standard error is held to this fraction of that δ, so
	// that three tunes in a thousand at most miss it: 0.05·w/6 ≈ 0.008·w. The readings the
	// sweep takes follow from it and the measured noise (sweepSpeed), never finer than
	// Options.CentreNoise asks.
	centreSigmas float64
	// minCore and maxCore bound the readings within ±w: five, the rational curve's
	// coefficients, are the least that determine it where the centre's information lies (the
	// noise asks for fewer only on the quietest couplers); eighty keep a noisy sweep within a few
	// seconds of carrier (a judgement).
	minCore float64
	maxCore float64
	// minSpacing (steps) and maxSpacing (of w) bound the distance between readings: below a
	// twentieth of a step more readings only repeat the motor's own microstep error; above 0.4
	// w, the spacing of minCore readings within ±w, the flanks hold too few readings for the
	// fit and the sweep comes near the gap judged too sparse (maxGap).
	minSpacing float64
	maxSpacing float64
	// minSpeed, steps per second, keeps a sweep from crawling on a slow converter (a
	// judgement).
	minSpeed float64
	// deepShare and deepSigmas: the sweep may stop early once its deepest averaged reading has
	// risen this much above the baseline (0.3, or six standard deviations of the averaged
	// noise if that is more), so that noise cannot fake a passed dip ...
	deepShare  float64
	deepSigmas float64
	// ... passedShare and passedWidths: and the absorbed share has fallen below passedShare of
	// that peak, passedWidths·w beyond it (a Lorentzian is at 0.28 of its peak 1.6w off its
	// centre: the far flank then holds as much of the curve as the margin gives the near one).
	passedShare  float64
	passedWidths float64
	// symmetricWidths and narrowStepSWR: on a dip so narrow that a step off its centre costs
	// more than narrowStepSWR (three times the tolerance: a half-width under about 7.5 steps),
	// the sweep also reads as far past the deepest point as before it, up to symmetricWidths·w,
	// where a Lorentzian is down to an eighth of its peak and readings further out add little
	// to the centre. A sweep stopped at passedWidths leaves the far flank shorter than the near
	// one and the fit's centre a fraction of a step toward the near side: on such a dip that
	// fraction decided between a tune and a miss (the bench's small loops on 40 m). On wider
	// dips a fraction of a step costs little, and the longer sweep only time (judgements, from
	// the bench's harsh ranges).
	symmetricWidths float64
	narrowStepSWR   float64
	// minDepth: a sweep whose deepest reading absorbs less than this saw no dip.
	minDepth float64
	// edgeWidths: a deepest reading within this many w of a sweep's end, short of the
	// travel's end, means the dip lies beyond; followWidths is how far beyond to sweep next,
	// with an uncertainty of uncertainWidths·w plus the sweep's spacing.
	edgeWidths      float64
	followWidths    float64
	uncertainWidths float64
	// maxFollows is how many times a sweep follows a dip past its edge: a third time means the
	// window's centre was wrong, and a wider scan does better (a judgement).
	maxFollows int
	// retryGrowth is how much more readings each retry of a doubtful sweep takes: twice the
	// readings halve the variance.
	retryGrowth int
	// maxEffort is the most readings a doubtful sweep is retried with, as a multiple of the
	// first sweep's: two doublings, as noise and late readings cost time, not correctness.
	maxEffort int
	// minMinimum is the fewest readings a last-resort "minimum" fit may rest on: fewer say
	// nothing about where in the step the dip lies.
	minMinimum int
	// maxGap is the widest median gap between readings, as a share of w, that a fit may rest
	// on: a sweep sparser than that (late readings on a busy computer) is swept again (a
	// judgement).
	maxGap float64
	// maxChi2: a fit whose reduced χ² (noise and placement, see fitParams.placement) exceeds
	// this does not describe its readings (readings misplaced by a drive late on its steps
	// under heavy load, or a dip that moved during the sweep), whatever its centre says, and is
	// swept again. Correct fits on the simulated stations stay below about 3, and below about
	// 10 on an overloaded board; one of 16 was seen to put a tune a dozen steps off (a
	// judgement, from those runs).
	maxChi2 float64
	// maxDownChi2: a sweep downward is held to this instead, and swept again upward where it
	// fails: its centre is turned into final-approach coordinates by the play a calibration
	// measured, which holds only while the drive train behaves as it did then, and a fit that
	// describes its readings less well than a correct one does (about 3) says it may not. On the
	// bench's harsh ranges, down-sweep fits of χ² 5 put tunes a step or two off narrow dips
	// that the verify, through a coupler of poor directivity, could not tell (a judgement).
	maxDownChi2 float64
	// maxCentreGap: the readings either side of the fitted centre may be at most this many
	// half-widths apart, so that each side has a reading above its half-power point, where the
	// curve is steepest and says most about the centre; a centre that falls in a wider gap (a
	// reading late just as the sweep crossed the dip) rests on the curve's shape alone and is
	// swept again. Two: five times the widest spacing a sweep plans (maxSpacing).
	maxCentreGap float64
	// centreSpacings and centreMinGap (steps): nor may they be more than centreSpacings of the
	// sweep's planned spacing apart (three readings missing in a row, which a loaded board's
	// late readings make now and then, but not right at the centre of a good sweep), nor less
	// than centreMinGap: two whole steps, one step's readings missing (a judgement).
	centreSpacings float64
	centreMinGap   float64
	// wideUncertainty: a dip found wider than planned (widerError) is swept again around its
	// fitted centre, taken to be within this many of its half-widths: a centre fitted from one
	// flank can be off by a good part of the width (a judgement).
	wideUncertainty float64
}

// fitParams shape the resonance fit and what it accepts.
type fitParams struct {
	// minSamples is the fewest readings a fit is tried on: the rational model has five
	// coefficients, and each flank needs a few readings beyond them (a judgement).
	minSamples int
	// minScale, steps, floors the expected width the positions are scaled by (the same as
	// motionParams.minWidth).
	minScale float64
	// relFloor floors the relative noise the readings are weighted by (the same as
	// noiseParams.relFloor).
	relFloor float64
	// absNoise is the absolute noise of |Γ|² assumed near the dip until the fit's residuals
	// there say otherwise: a starting guess, half of noiseParams.absFloor.
	absNoise float64
	// minAbsNoise floors that estimate: residuals can vanish on noiseless readings, and the
	// weights must stay finite.
	minAbsNoise float64
	// residualShare: the absolute noise near the dip is taken as this share of the residuals'
	// rms there, as the residuals also hold the model's own error (a judgement).
	residualShare float64
	// nearGamma2 and nearReadings: the residuals of readings whose modelled |Γ|² is below
	// nearGamma2 give the absolute noise near the dip once there are nearReadings of them.
	nearGamma2   float64
	nearReadings int
	// iterations bound the reweighted least-squares iteration, and converged is the change of
	// the denominator's coefficients that ends it (a judgement: the iteration settles within a
	// few rounds on a sweep through a dip, and the rest are a safety net).
	iterations int
	converged  float64
	// minWidthRatio and maxWidthRatio bound the fitted half-width against the expected one (a
	// judgement: room for a default Q several times off, none for a "dip" of a few noisy
	// readings or a slow drift across the whole sweep).
	minWidthRatio float64
	maxWidthRatio float64
	// sideWidths and sideReadings: a fit needs sideReadings readings within sideWidths fitted
	// half-widths on either side of its centre (2.5 half-widths hold the dip down to about a
	// seventh of its depth).
	sideWidths   float64
	sideReadings int
	// minFar and maxFar bound the |Γ|² the rational curve tends to far from the dip: near
	// one, moved by the coupler's leakage; beyond these the curve is not a resonance (a
	// judgement).
	minFar float64
	maxFar float64
	// minBottom and maxBottom bound the fitted |Γ|² at the centre: a little below zero is
	// noise, above 0.9 there is hardly a dip (a judgement). The rational fit allows a bottom
	// down to bottomSigmas times the absolute noise its residuals near the dip show, where that
	// is lower: three standard deviations.
	minBottom    float64
	maxBottom    float64
	bottomSigmas float64
	// minDepth: the fallback Lorentzian needs a dip deeper than this (the same as
	// sweepParams.minDepth), and peakShare is the part of the peak it fits (the reciprocal's
	// error grows as 1/A², so the tails would only add noise; 0.3 is a judgement).
	minDepth  float64
	peakShare float64
	// minimumSpan, steps: the last-resort minimum averages the readings within this of the
	// lowest one.
	minimumSpan float64
	// placement, steps, is the standard error of a reading's position in the fit's χ²: a
	// reading taken on the move is placed at the whole step the motor stood on (±0.5, 0.29
	// rms), and the drive's pulses keep their plan only roughly (0.5, a judgement).
	placement float64
}

// verifyParams judge the reading at the final position.
type verifyParams struct {
	// readings averaged at the first verify, at most; each retry doubles them. Three: a verify
	// is a check, not a measurement, and the fit already averaged many.
	readings int
	// minReadings: the fewest; one, where the noise is low enough that more would not tighten
	// the check (verifyReadings).
	minReadings int
	// maxResweeps is how many slower sweeps a failed verify may ask for before the loop is
	// reported not tuned.
	maxResweeps int
	// resweepSlack, steps, is added to w as the slower sweep's uncertainty about the centre.
	resweepSlack float64
	// resweepEffort is the slower sweep's readings, as a multiple of the first sweep's.
	resweepEffort int
	// misplace, steps, is the placement error the verify allows for: rounding to a whole step
	// and the approach's repeatability.
	misplace float64
	// gammaFloor is the least |Γ|² the verify's relative noise is taken at: a log detector's
	// noise does not vanish with the reflection (a judgement).
	gammaFloor float64
	// sigmas is how many standard errors of the mean verify reading it may read above the fit:
	// four leave a good tune failed about once in 30,000.
	sigmas float64
	// slack in |Γ|² for the fit's own error: 0.005 is an SWR of 1.15 from a perfect match.
	slack float64
	// compareSigma, steps, is the standard error the readings that place a fit found sweeping
	// down (placeByReadings) must reach for the comparison to be made: a fifth of the half step
	// that decides between two steps (a judgement).
	compareSigma float64
	// compareReadings is the most readings the comparison may take at each of the two steps:
	// where more would be needed (a noisy bottom, or a wide one, which is flat) the comparison
	// costs more carrier than the step it may save is worth, and the fit alone decides (a
	// judgement).
	compareReadings int
	// compareShift, steps, is the furthest the comparison may move the fitted curve: the play's
	// error has been seen at a step or two; readings that ask for more disagree with the curve
	// itself, and the verify judges the fit's own centre instead.
	compareShift float64
}

// learnParams decide what a tune teaches the map.
type learnParams struct {
	// slipWidths and slipSteps are the least distance from the prediction that counts as a
	// surprise whatever σ says, besides Options.SlipLimit·σ: 4w + 4 steps, well beyond the
	// dip's own flanks (a judgement).
	slipWidths float64
	slipSteps  float64
	// sameShare, sameWidths and sameSteps say when two surprises have the same offset (lost
	// steps, not a wrong map): within a fifth of the offset, plus 2w + 2 steps for where the fit
	// put each dip (a judgement).
	sameShare  float64
	sameWidths float64
	sameSteps  float64
	// sameBand is how close two frequencies must be, as a share, for one to contradict the
	// other's map point: 10 % (a wide amateur band is about 7 % wide).
	sameBand float64
}

// playParams shape the backlash measurement.
type playParams struct {
	// sweeps is how many up-and-down pairs are swept: two, to see whether they repeat.
	sweeps int
	// slack, steps, is added to the backlash's uncertainty as the sweeps' window (a
	// judgement).
	slack float64
	// boundFactor, boundWidths and boundSteps bound the play the gear can have: twice the
	// nominal bound, plus 4w + 4 steps for the fits' errors (a judgement).
	boundFactor float64
	boundWidths float64
	boundSteps  float64
	// spreadWidths, spreadSteps and spreadShare bound how far the up (or down) centres may
	// disagree: 2w + 2 steps, or a quarter of the play if that is more (a judgement).
	spreadWidths float64
	spreadSteps  float64
	spreadShare  float64
	// minCore is the fewest readings within ±w each of its sweeps takes, where the noise asks
	// for fewer: ten, twice a tune's, as a calibration measures a difference of two centres
	// once, to be kept for months, and must not be upset by a reading late across a dip (a
	// judgement).
	minCore float64
	// centreNoise, steps, is the standard error of the centre each of its sweeps is sized for,
	// whatever the dip's width (a tune's grows with the width): the play then comes out to
	// about as much, fine enough to turn a dip found sweeping down into final-approach
	// coordinates on all but the narrowest dips (playKnown; a judgement).
	centreNoise float64
	// storedSigma, steps, is the standard error assumed of a play installed from a stored
	// calibration: rounded to a whole step (±0.5), and the gear may have worn since (a
	// judgement).
	storedSigma float64
	// maxEffort is the most readings the sweeps are repeated with, as a multiple of the first.
	maxEffort int
	// fitWidths: each of its sweeps is fitted on the readings within this many dip half-widths
	// of its centre, as far on one side as on the other, and reads that far past the dip (see
	// symmetricAround): two, which keeps the flanks where the curve is steepest.
	fitWidths float64
	// lopsided is the error, as a share of the dip's half-width, that the up and down sweeps
	// make alike however often they are repeated: a coupler of poor directivity makes the dip
	// lopsided, which the fitted curve follows nearly but not quite, and what is left does not
	// quite cancel between the two directions. A two-hundredth: about what is seen on the simulated
	// couplers down to 17 dB of directivity (a judgement from the tests).
	lopsided float64
}

// motionParams size the moves around the dip.
type motionParams struct {
	// runUpMargin, steps, is added to the play for a run-up that certainly takes it up, for
	// the play's variation along the shaft (a judgement).
	runUpMargin motion.Steps
	// assumedPlay is the share of the nominal backlash bound taken as the play before a
	// calibration, and as its uncertainty: the nominal value is an upper bound, so half of it,
	// ± half, covers the whole range.
	assumedPlay float64
	// minWidth, steps, is the narrowest dip assumed: a dip narrower than half a step cannot be
	// placed better than the motor allows anyway.
	minWidth float64
	// rangeSigmas: a dip predicted this many σ outside the soft limits is out of range: 3σ
	// leaves it there with 99.9 % confidence if σ is honest.
	rangeSigmas float64
}

// rfParams time the carrier and the readings.
type rfParams struct {
	// offFrequency is how far the radio may be from the tune's frequency: well inside the
	// loop's bandwidth on any band (a loaded Q of 1000 at 1.8 MHz is 1.8 kHz wide).
	offFrequency physic.Frequency
	// carrierPoll is the wait between readings while waiting for a carrier: short against a
	// person's reaction, long against a reading (a judgement).
	carrierPoll time.Duration
	// lostReadings in a row without a carrier mean it was lost: one or two can be a keying
	// transient or a converter glitch.
	lostReadings int
	// readingGuess is the reading time assumed before the first reading: two conversions of a
	// small converter (from memory); the median of the readings replaces it at once.
	readingGuess time.Duration
	// keyPoll is how often the tuner polls a move it follows itself (keying during it, or
	// letting a sweep run out), and the least pace of the readings that wait for a key-up: the
	// axis's own poll (2 ms, the station's), well within a key-up time of tens of ms.
	keyPoll time.Duration
	// rekeyGain is the least carrier time that dropping the carrier for a move must save (the
	// move's time less the key-up time) to be worth keying again: a drop is one more relay
	// cycle for the radio and two more commands on a link that may fail, worth it only for
	// some ten readings' carrier (a judgement).
	rekeyGain time.Duration
	// unkeyTimeout bounds one unkey attempt; unkeyAttempts are made, unkeyPause apart: a CAT
	// link answers within a second or so, and a dropped command is usually a one-off (from
	// memory).
	unkeyTimeout  time.Duration
	unkeyAttempts int
	unkeyPause    time.Duration
}

// readingWindow is how many of the latest readings' durations readingTime takes the median
// of: enough that a few late readings (a busy computer) do not move it, few enough to follow
// a lasting change of load.
const readingWindow = 16

// defaultParams are the values the tuner runs with.
func defaultParams() params {
	// values that more than one group uses, so that each has one home
	const (
		relFloor = 0.002 // noiseParams.relFloor
		minWidth = 0.5   // motionParams.minWidth
		minDepth = 0.2   // sweepParams.minDepth
	)
	return params{
		noise: noiseParams{
			readings:     8,
			fewReadings:  3,
			memoryWeight: 7,
			memoryAge:    time.Hour,
			poolLevels:   math.Ln2,
			change:       2,
			minCarried:   3,
			clippedRel:   0.03,
			clippedAbs:   0.03,
			relFloor:     relFloor,
			absFloor:     2e-4,
			logFloor:     1e-6,
			offDipGamma2: 0.6,
			flankGamma2:  0.3,
		},
		scan: scanParams{
			minSpacing:            1,
			minThreshold:          0.12,
			maxThreshold:          0.45,
			sigmas:                5,
			maxAveraging:          16,
			windowSigmas:          3,
			windowWidths:          3,
			startSigmas:           1,
			growth:                3,
			hitSlack:              2,
			hitReadings:           2,
			hitSpanWidths:         4,
			passedFactor:          3,
			passedWidths:          2,
			falseHits:             5,
			rejectWidths:          2,
			baselineReadings:      32,
			baselineWarmup:        5,
			baselineKeep:          8,
			inDipShare:            0.5,
			holeWidths:            2.5,
			holeSpacings:          2,
			holeRounds:            2,
			calibratedUncertainty: 2,
		},
		sweep: sweepParams{
			marginWidths:    1.8,
			directSigmas:    3,
			directSlack:     1,
			directWidths:    4,
			centreFactor:    1.5,
			swrBudget:       0.05,
			centreSigmas:    3,
			minCore:         5,
			maxCore:         80,
			minSpacing:      0.05,
			maxSpacing:      0.4,
			minSpeed:        5,
			deepShare:       0.3,
			deepSigmas:      6,
			passedShare:     0.3,
			passedWidths:    1.6,
			symmetricWidths: 2.7,
			narrowStepSWR:   0.3,
			minDepth:        minDepth,
			edgeWidths:      1,
			followWidths:    2,
			uncertainWidths: 2,
			maxFollows:      2,
			retryGrowth:     2,
			maxEffort:       4,
			minMinimum:      3,
			maxGap:          0.5,
			maxCentreGap:    2,
			centreSpacings:  4,
			centreMinGap:    2,
			wideUncertainty: 1,
			maxChi2:         6,
			maxDownChi2:     3,
		},
		fit: fitParams{
			minSamples:    8,
			minScale:      minWidth,
			relFloor:      relFloor,
			absNoise:      1e-4,
			minAbsNoise:   1e-5,
			residualShare: 0.5,
			nearGamma2:    0.05,
			nearReadings:  3,
			iterations:    12,
			converged:     1e-9,
			minWidthRatio: 0.15,
			maxWidthRatio: 6,
			sideWidths:    2.5,
			sideReadings:  2,
			minFar:        0.3,
			maxFar:        1.6,
			minBottom:     -0.02,
			maxBottom:     0.9,
			bottomSigmas:  3,
			minDepth:      minDepth,
			peakShare:     0.3,
			minimumSpan:   1,
			placement:     0.5,
		},
		verify: verifyParams{
			readings:        3,
			minReadings:     1,
			maxResweeps:     1,
			resweepSlack:    2,
			resweepEffort:   2,
			misplace:        0.75,
			gammaFloor:      0.02,
			sigmas:          4,
			slack:           0.005,
			compareSigma:    0.1,
			compareReadings: 4,
			compareShift:    2.5,
		},
		learn: learnParams{
			slipWidths: 4,
			slipSteps:  4,
			sameShare:  0.2,
			sameWidths: 2,
			sameSteps:  2,
			sameBand:   0.1,
		},
		play: playParams{
			sweeps:       2,
			slack:        2,
			boundFactor:  2,
			boundWidths:  4,
			boundSteps:   4,
			spreadWidths: 2,
			spreadSteps:  2,
			spreadShare:  0.25,
			minCore:      10,
			centreNoise:  0.05,
			storedSigma:  0.5,
			maxEffort:    2,
			fitWidths:    2,
			lopsided:     0.005,
		},
		motion: motionParams{
			runUpMargin: 8,
			assumedPlay: 0.5,
			minWidth:    minWidth,
			rangeSigmas: 3,
		},
		rf: rfParams{
			offFrequency:  100 * physic.Hertz,
			carrierPoll:   20 * time.Millisecond,
			lostReadings:  3,
			readingGuess:  3 * time.Millisecond,
			keyPoll:       2 * time.Millisecond,
			rekeyGain:     20 * time.Millisecond,
			unkeyTimeout:  2 * time.Second,
			unkeyAttempts: 3,
			unkeyPause:    100 * time.Millisecond,
		},
	}
}
