package bench

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/coupler"
	"github.com/tankd/tankd/sim/env"
	"github.com/tankd/tankd/sim/vclock"
)

// The references (the exhaustive sweep and the oracle) are computed here from the simulator's
// truth at the scenario's instant, without running the motion loop: where the motor stands and
// how its gear play lies, the axis's own rules for a move (its profile, the poll that sees it
// end, the settling time, the run-up of an approach), the weather at every instant, and the
// coupler's conversions. They take the same time, to the nanosecond, as the same strategies
// stepped through the motion loop (runExhaustive, runOracle), and end where those end, but for
// what is drawn at random:
//
//   - the reading noise is the coupler's in law and size, and lost pulses the mechanics' (each
//     pulse lost with the station's miss rate, the gaps between losses geometric), but both are
//     drawn from streams of the references' own (the station's streams belong to the
//     controller's run); only the readings near the dip are computed: one far from it cannot be
//     the lowest. A scenario whose references would drive the motor beyond what it follows
//     (faster than its pull-out speed, or steeper than its ramp), where the mechanics lose
//     pulses by another law, is stepped instead (errStepIt).
//   - scheduling jitter (a test mode) does not delay them: a reference runs on an idle computer.
//
// Their moves stay inside the soft limits and off the stops by construction, so they add no
// crossings or stalls to the scenario's.

// refReadPower is the tune carrier both references key, W: the controller's own default tune
// power (tuning.tune_power_w), so that all three read the coupler at the same level.
const refReadPower = 5

// refNoiseStream tells the references' noise stream from every other drawn from a scenario's
// seed ("refs"); refLossStream their lost pulses' ("refl", then one per reference).
const (
	refNoiseStream = 0x72656673
	refLossStream  = 0x7265666c
)

// errStepIt: a reference of this scenario cannot be computed from the truth; step it.
var errStepIt = errors.New("references: the motor cannot follow their moves: stepped instead")

// lossStream draws the pulses a motor loses as sim/mech does for pulses within its limits:
// each is lost with probability q, the gaps between losses geometric.
type lossStream struct {
	rng  *rand.Rand
	q    float64
	seen int64 // pulses so far
	next int64 // number of the next lost one
}

func newLossStream(seed uint64, which uint64, q float64) *lossStream {
	l := &lossStream{rng: rand.New(rand.NewPCG(seed, refLossStream+which)), q: q}
	l.next = l.gap()
	return l
}

// gap draws the distance to the next lost pulse, >= 1 (inverse transform: P(gap > k) = (1−q)^k).
func (l *lossStream) gap() int64 {
	if l.q <= 0 {
		return math.MaxInt64 / 2
	}
	g := math.Floor(math.Log1p(-l.rng.Float64())/math.Log1p(-l.q)) + 1
	return int64(math.Min(g, math.MaxInt64/4))
}

// take passes n more pulses and returns where the lost ones fell among them (1-based).
func (l *lossStream) take(n int64) []int64 {
	var at []int64
	end := l.seen + n
	for l.next <= end {
		at = append(at, l.next-l.seen)
		l.next += l.gap()
	}
	l.seen = end
	return at
}

// gridCut is the true |Γ|² (as the coupler reads it without noise) beyond which an exhaustive
// sweep's reading cannot be its lowest: the readings near the dip read a few hundredths, and
// even ten times the nominal noise moves a reading by well under a tenth (log detectors: 6 mV
// at 25 mV/dB is a quarter of a dB; diodes: a few mV against volts), so a point reading half
// the power back is never chosen. The sweep's readings are computed out to it either side of
// the dip, and gridGuard points more (a margin: the cut already clears the noise tenfold).
const (
	gridCut   = 0.5
	gridGuard = 2
)

// truth answers the references' questions about the simulated station at any instant: a
// second station built from the same Spec, asked but never run (the rig's own station caches
// its RF model by temperature, and a query out of turn would change what the controller reads
// next), and the coupler's law applied to what it answers.
type truth struct {
	st      *sim.Station
	clk     *vclock.Clock
	keyUp   int // keyUpReads once known; -1 before
	spec    sim.Spec
	rf      *sim.RF
	weather *env.Weather
	coupler *coupler.Coupler
	opts    coupler.Options
	sensor  *sense.Coupler
	adc     *fixedADC
	noise   *rand.Rand
	seed    uint64
	perTurn float64
	// half is how far the shaft trails the motor moving up (leads it moving down), as the
	// mechanics have it: half the play in whole steps.
	half             float64
	stops            bool
	stopMin, stopMax float64
	lsb, top         float64
}

// fixedADC hands the sensor the voltages the references computed.
type fixedADC struct{ v sense.Voltages }

// Read implements sense.ADC.
func (a *fixedADC) Read(context.Context) (sense.Voltages, error) { return a.v, nil }

func newTruth(s sim.Spec, seed uint64) (*truth, error) {
	clk := vclock.New(vclock.Epoch)
	st, err := sim.NewStation(s, clk)
	if err != nil {
		return nil, err
	}
	co, err := s.CouplerOptions()
	if err != nil {
		return nil, err
	}
	adc := &fixedADC{}
	sn, err := sense.NewCoupler(adc, st.Coupler.Calibration())
	if err != nil {
		return nil, err
	}
	top := math.Exp2(float64(co.ADC.Bits)) - 1
	tr := &truth{st: st, clk: clk, keyUp: -1, spec: s, rf: st.RF, weather: st.Weather, coupler: st.Coupler, opts: co, sensor: sn, adc: adc,
		noise: rand.New(rand.NewPCG(seed, refNoiseStream)), seed: seed,
		perTurn: s.StepsPerTurn(), half: float64(int64(math.Round(s.Drive.BacklashSteps))) / 2,
		lsb: co.ADC.FullScale / top, top: top}
	if s.HardStops() {
		tr.stops, tr.stopMin, tr.stopMax = true, 0, st.RF.Capacitor().Options().Span*tr.perTurn
	}
	return tr, nil
}

// keyUpReads is how many reads, one after another from the key, a reference takes before it
// sees its carrier (readOnCarrier): the radio's own keying, asked once of the truth's radio,
// keyed on the truth's clock. The radio keys up in the same time whenever it is keyed.
func (tr *truth) keyUpReads(f physic.Frequency) (int, error) {
	if tr.keyUp >= 0 {
		return tr.keyUp, nil
	}
	clk, radio := tr.clk, tr.st.Radio
	if err := radio.SetFrequency(f); err != nil {
		return 0, err
	}
	if err := radio.Key(context.Background(), refPower); err != nil {
		return 0, err
	}
	t := clk.Now()
	read := tr.readTime()
	for k := range maxKeyUpReads {
		// the forward channel's instant of the k-th read decides whether it sees the carrier
		fwd, _, _ := tr.conversions(t.Add(time.Duration(k) * read))
		clk.Advance(fwd.Sub(clk.Now()))
		if on, p := radio.Carrier(); on && p >= carrierSeen {
			tr.keyUp = k
			return k, nil
		}
	}
	return 0, errNoCarrier
}

// temp is the air temperature at t.
func (tr *truth) temp(t time.Time) float64 { return tr.weather.Temperature(t) }

// best is sim.Station.Best at instant t: the motor position, approached from below with the
// play taken up, that gives the lowest SWR at f, and that SWR.
func (tr *truth) best(f float64, t time.Time) (motion.Steps, float64, error) {
	temp := tr.temp(t)
	turns, ok := tr.rf.DipTurns(f, temp)
	if !ok {
		return 0, 0, fmt.Errorf("truth: the capacitor cannot tune %.0f Hz", f)
	}
	half := tr.spec.ShaftLag()
	centre := turns*tr.perTurn + half
	var pos motion.Steps
	swr := math.Inf(1)
	for p := math.Floor(centre) - 2; p <= math.Ceil(centre)+2; p++ {
		if s := tr.rf.SWR(f, (p-half)/tr.perTurn, temp); s < swr {
			pos, swr = motion.Steps(p), s
		}
	}
	return pos, swr, nil
}

// swr is the true SWR at f with the shaft at shaft (steps) at instant t.
func (tr *truth) swr(f, shaft float64, t time.Time) float64 {
	return tr.rf.SWR(f, shaft/tr.perTurn, tr.temp(t))
}

// conversions are the instants a read that starts at t samples the forward and the reflected
// channel, and how long the read takes, as sim/coupler's Read has them.
func (tr *truth) conversions(t time.Time) (fwd, ref time.Time, took time.Duration) {
	conv := tr.opts.ADC.Conversion
	half := conv / 2
	if tr.opts.ADC.Simultaneous {
		return t.Add(half), t.Add(half), conv
	}
	return t.Add(half), t.Add(half + conv/2 + half), half + conv/2 + half + conv - half
}

// readTime is how long one read takes.
func (tr *truth) readTime() time.Duration {
	_, _, d := tr.conversions(time.Time{})
	return d
}

// convert is one channel's conversion by the ADC (sim/coupler's), with noise when noisy.
func (tr *truth) convert(v float64, noisy bool) float64 {
	if noisy && tr.opts.ADC.Noise > 0 {
		v += tr.noise.NormFloat64() * tr.opts.ADC.Noise
	}
	code := math.Round(v / tr.lsb)
	return math.Min(math.Max(code, 0), tr.top) * tr.lsb
}

// gamma2 is the |Γ|² the controller's sensor reads at f for the shaft at shaft (steps), the
// read starting at t, with the station's noise or without.
func (tr *truth) gamma2(f, shaft float64, t time.Time, noisy bool) float64 {
	_, tRef, _ := tr.conversions(t)
	g := tr.rf.Gamma(f, shaft/tr.perTurn, tr.temp(tRef))
	fwd, ref := tr.coupler.Detected(refReadPower, g)
	tr.adc.v.Forward = tr.convert(tr.opts.Forward.Volts(fwd), noisy)
	tr.adc.v.Reflected = tr.convert(tr.opts.Reflected.Volts(ref), noisy)
	rd, _ := tr.sensor.Read(context.Background())
	return rd.Gamma2()
}

// clampShaft keeps the shaft between the hard stops, if any.
func (tr *truth) clampShaft(s float64) float64 {
	if tr.stops {
		return math.Min(math.Max(s, tr.stopMin), tr.stopMax)
	}
	return s
}

// dryAxis is motion.Axis's account of moves, kept without a drive: the same profiles, the
// move seen over at the first poll at or after its planned end, the settling time, the run-up
// of an approach; and the simulated shaft following the motor through its play. It is what a
// reference does from a given state, in virtual time.
type dryAxis struct {
	tr               *truth
	lost             *lossStream
	min, max         motion.Steps
	maxSpeed, accel  float64
	settle, poll     time.Duration
	margin, backlash motion.Steps

	pos       motion.Steps // the axis's count
	offset    motion.Steps // the axis's count less the motor's true position
	trusted   bool
	lastDir   motion.Direction
	run       motion.Steps
	unsettled bool
	shaft     float64 // the quasi-static shaft, steps
	t         time.Time
}

// dryAxisAt is the rig's axis and mechanics as they stand now; which numbers the reference's
// own stream of lost pulses.
func dryAxisAt(r *Rig, tr *truth, which uint64) (*dryAxis, error) {
	p, err := r.Axis.Plan(1, 0)
	if err != nil {
		return nil, err
	}
	lo, hi := r.Axis.SoftLimits()
	snap := r.Axis.Snapshot()
	a := &dryAxis{tr: tr, min: lo, max: hi, maxSpeed: p.MaxSpeed, accel: p.Accel,
		settle: r.Axis.Settle(), poll: r.axisOpts.Poll, margin: r.axisOpts.ApproachMargin,
		backlash: snap.Backlash, pos: snap.Position, trusted: snap.Trusted,
		lastDir: r.watch.lastDir, run: r.watch.run,
		shaft: r.Station.Mech.Shaft(), t: r.Time.Now()}
	if a.poll <= 0 || a.margin <= 0 {
		// station.Description.AxisOptions sets both; an axis left to motion's defaults would
		// need them here too
		return nil, fmt.Errorf("dry axis: poll %v, approach margin %d: want the axis's own", a.poll, a.margin)
	}
	a.offset = a.pos - r.Station.Mech.MotorPosition()
	if snap.Moving {
		return nil, errors.New("dry axis: the motor is moving")
	}
	if sd := tr.spec.Simulator.Drive; a.maxSpeed > sd.PulloutSpeed || a.accel > sd.MaxAccel {
		return nil, errStepIt
	}
	a.lost = newLossStream(tr.seed, which, tr.spec.Simulator.Drive.MissRate)
	return a, nil
}

// motor is the motor's true position for an axis count.
func (a *dryAxis) motor(p motion.Steps) float64 { return float64(p - a.offset) }

// plan is the time a move of n steps at full speed takes as the axis follows it: its profile's
// duration rounded up to the axis's polls.
func (a *dryAxis) plan(n motion.Steps) (time.Duration, error) {
	p, err := motion.Plan(n, a.maxSpeed, a.accel)
	if err != nil {
		return 0, err
	}
	d := p.Duration()
	return (d + a.poll - 1) / a.poll * a.poll, nil
}

// moveTo is Axis.MoveTo (settle) or Axis.MoveThrough at full speed: the time moving and the
// time settling.
func (a *dryAxis) moveTo(target motion.Steps, settle bool) (moving, settling time.Duration, err error) {
	if n := target - a.pos; n != 0 {
		dir := motion.Up
		if n < 0 {
			dir, n = motion.Down, -n
		}
		if moving, err = a.plan(n); err != nil {
			return 0, 0, err
		}
		a.pos = target
		// a lost pulse leaves the motor where it was: behind the count
		a.offset += motion.Steps(dir) * motion.Steps(len(a.lost.take(n)))
		if m := a.motor(target); dir == motion.Up {
			a.shaft = a.tr.clampShaft(math.Max(a.shaft, m-a.tr.half))
		} else {
			a.shaft = a.tr.clampShaft(math.Min(a.shaft, m+a.tr.half))
		}
		if dir != a.lastDir {
			a.lastDir, a.run = dir, 0
		}
		a.run += n
		a.unsettled = true
	}
	if settle && a.unsettled {
		settling, a.unsettled = a.settle, false
	}
	a.t = a.t.Add(moving + settling)
	return moving, settling, nil
}

// approach is Axis.Approach: the run-up if the play needs taking up, then the move and its
// settling; the time moving and the time settling.
func (a *dryAxis) approach(target motion.Steps) (moving, settling time.Duration, err error) {
	if target < a.min || target > a.max {
		return 0, 0, fmt.Errorf("dry axis: approach %d: %w", target, motion.ErrSoftLimit)
	}
	if pre, need := a.runUp(target); need {
		if moving, settling, err = a.moveTo(pre, false); err != nil {
			return 0, 0, err
		}
	}
	m, s, err := a.moveTo(target, true)
	return moving + m, settling + s, err
}

// runUp is Axis.runUp for an up-approach.
func (a *dryAxis) runUp(target motion.Steps) (pre motion.Steps, need bool) {
	b := a.backlash
	if b == 0 {
		return 0, false
	}
	delta := target - a.pos
	switch {
	case delta == 0:
		need = !(a.lastDir == motion.Up && a.run >= b)
	case delta > 0:
		carried := motion.Steps(0)
		if a.lastDir == motion.Up {
			carried = a.run
		}
		need = carried+delta < b
	default:
		need = true
	}
	pre = min(max(target-(b+a.margin), a.min), a.max)
	return pre, need && pre != target
}

// refResult is what a reference did.
type refResult struct {
	attempt
	phases    Phases
	swr, best float64
}

// exhaustiveFromTruth is runExhaustive computed from the truth: the same sweep, timed by the
// axis's rules, its readings near the dip computed from the coupler's law.
func exhaustiveFromTruth(a *dryAxis, desc station.Description, freq physic.Frequency) (refResult, error) {
	tr := a.tr
	start := a.t
	f := Hz(freq)
	var ph Phases
	step, err := exhaustiveStep(desc, freq)
	if err != nil {
		return refResult{}, err
	}
	lo, hi := a.min+motion.Steps(desc.Drive.BacklashSteps)+exhaustiveStartMargin, a.max
	if lo > hi {
		return refResult{}, fmt.Errorf("exhaustive: no travel above %d", lo)
	}
	mv, st, err := a.approach(lo)
	if err != nil {
		return refResult{}, err
	}
	ph.Travel, ph.Settle = mv.Seconds(), st.Seconds()
	// The sweep: a read where it stands (repeated until the carrier is up), then a step up, its
	// settling and a read, n−1 times.
	rfStart := a.t
	read := tr.readTime()
	keyUp, err := tr.keyUpReads(freq)
	if err != nil {
		return refResult{}, err
	}
	first := time.Duration(keyUp) * read // the reads that found no carrier yet
	n := int64((hi-lo)/step) + 1
	mv = 0
	if n > 1 {
		if mv, err = a.plan(step); err != nil {
			return refResult{}, err
		}
	}
	period := mv + a.settle + read
	shaft0 := a.shaft
	// The sweep's pulses are all alike (within the motor's limits, dryAxisAt made sure): where
	// it loses some, the motor falls behind the count from there on.
	lostAt := a.lost.take(motion.Steps(n-1) * step)
	behind := func(k int64) motion.Steps {
		x := motion.Steps(k) * step
		return motion.Steps(sort.Search(len(lostAt), func(i int) bool { return lostAt[i] > x }))
	}
	at := func(k int64) time.Time { return rfStart.Add(first + time.Duration(k)*period) }
	shaftAt := func(k int64) float64 {
		if k == 0 {
			return shaft0
		}
		return tr.clampShaft(math.Max(shaft0, a.motor(lo+motion.Steps(k)*step)-float64(behind(k))-tr.half))
	}
	// The grid point nearest the dip as the sweep passes it: the dip moves with the temperature
	// over a sweep of many minutes, so its time is found again once or twice.
	k := int64(0)
	for range 4 {
		turns, ok := tr.rf.DipTurns(f, tr.temp(at(k)))
		if !ok {
			return refResult{}, fmt.Errorf("exhaustive: the capacitor cannot tune %.0f Hz", f)
		}
		pos := turns*tr.perTurn + tr.half + float64(a.offset)
		next := min(max(int64(math.Round((pos-float64(lo))/float64(step))), 0), n-1)
		if next == k {
			break
		}
		k = next
	}
	inside := func(j int64) bool { return tr.gamma2(f, shaftAt(j), at(j), false) < gridCut }
	ka, kb := k, k
	for ka > 0 && inside(ka-1) {
		ka--
	}
	for kb < n-1 && inside(kb+1) {
		kb++
	}
	ka, kb = max(ka-gridGuard, 0), min(kb+gridGuard, n-1)
	best, bestG := lo, math.Inf(1)
	for j := ka; j <= kb; j++ {
		if g := tr.gamma2(f, shaftAt(j), at(j), true); g < bestG {
			best, bestG = lo+motion.Steps(j)*step, g
		}
	}
	// Where the sweep leaves the motor.
	a.t = rfStart.Add(first + read + time.Duration(n-1)*period)
	if n > 1 {
		a.shaft = shaftAt(n - 1)
		a.pos = lo + motion.Steps(n-1)*step
		a.offset += behind(n - 1)
		if a.lastDir != motion.Up {
			a.lastDir, a.run = motion.Up, 0
		}
		a.run += motion.Steps(n-1) * step
		a.unsettled = false
	}
	rf := a.t.Sub(rfStart)
	ph.Travel += float64(n-1) * mv.Seconds()
	ph.Settle += float64(n-1) * a.settle.Seconds()
	ph.Readings += float64(n)*read.Seconds() + first.Seconds()
	mv, st, err = a.approach(best)
	if err != nil {
		return refResult{}, err
	}
	ph.Approach = (mv + st).Seconds()
	res := refResult{attempt: attempt{tuneTime: a.t.Sub(start), rfTime: rf, outcome: "swept"}, phases: ph,
		swr: tr.swr(f, a.shaft, a.t)}
	_, res.best, err = tr.best(f, a.t)
	return res, err
}

// oracleFromTruth is runOracle computed from the truth: the approach to the best position with
// the true play taken up, and one reading.
func oracleFromTruth(a *dryAxis, freq physic.Frequency) (refResult, error) {
	tr := a.tr
	f := Hz(freq)
	start := a.t
	best, _, err := tr.best(f, a.t)
	if err != nil {
		return refResult{}, err
	}
	a.backlash = motion.Steps(math.Ceil(tr.spec.Drive.BacklashSteps))
	// As runOracle: it sees the shaft, so it goes again while the motor has lost pulses.
	t0 := a.t
	for range 6 {
		if t := best + a.offset; t < a.min || t > a.max || !a.trusted {
			// back to the motor's own frame
			a.pos, a.offset, a.trusted = motion.Steps(a.motor(a.pos)), 0, true
		}
		if _, _, err := a.approach(best + a.offset); err != nil {
			return refResult{}, err
		}
		if motion.Steps(a.motor(a.pos)) == best {
			break
		}
	}
	d := a.t.Sub(t0)
	keyUp, err := tr.keyUpReads(freq)
	if err != nil {
		return refResult{}, err
	}
	read := time.Duration(keyUp+1) * tr.readTime()
	a.t = a.t.Add(read)
	res := refResult{attempt: attempt{tuneTime: a.t.Sub(start), rfTime: read, outcome: "placed"},
		phases: Phases{Approach: d.Seconds(), Verify: read.Seconds()}, swr: tr.swr(f, a.shaft, a.t)}
	_, res.best, err = tr.best(f, a.t)
	return res, err
}
