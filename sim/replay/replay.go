package replay

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"maps"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/sense"
)

// Errors for errors.Is.
var (
	// ErrNoData: the recording cannot answer for this position, direction or frequency.
	ErrNoData = errors.New("no recorded data")
	// ErrBusy: a move was started while another one runs.
	ErrBusy = errors.New("a move is running")
	// ErrDisabled: a move was started with the motor released.
	ErrDisabled = errors.New("motor disabled")
)

// DefaultConversion is the Read time used when Options.Conversion is zero: about what a 12- to
// 16-bit I2C ADC takes for one conversion.
const DefaultConversion = time.Millisecond

// Options tunes a Replay. The zero value replays the most common frequency, starting at step 0
// with the play taken up going up, and fails where the recording has no data.
type Options struct {
	// Freq selects the samples to replay. Default (0): the frequency most samples were taken at;
	// of equally common ones, the lowest.
	Freq physic.Frequency
	// Conversion is how long one Read takes on the clock. Default DefaultConversion.
	Conversion time.Duration
	// Position is the motor position at construction, in the recording's steps. Default 0.
	Position motion.Steps
	// Dir is the direction of travel assumed before the first move. Default (0): motion.Up.
	Dir motion.Direction
	// Fallback lets Read answer from the other direction's samples where the direction of travel
	// has none, shifted by Backlash: travelling in direction d at step p, the shaft stands where
	// it stood travelling the other way at p − d·Backlash.
	Fallback bool
	// Backlash is the gear play for Fallback, in steps (>= 0).
	Backlash motion.Steps
	// CarrierOff starts the replay with no carrier: readings are zero until Carrier(true).
	CarrierOff bool
	// HoldEnds answers outside a direction's recorded span with the reading at its nearer end,
	// instead of ErrNoData: a recording that runs far enough into the dip's tails holds total
	// reflection there, as the loop would, so a controller may run past the ends.
	HoldEnds bool
	// Name is what String returns. Default "replay".
	Name string
	// Silent replays the recording's averaged readings as they are: every reading at a position
	// answers the same. By default each reading carries fresh noise of the size the recording's
	// own scatter shows (Noise), drawn from Seed, so that a controller measures the noise the
	// recording was made with rather than none.
	Silent bool
	// Seed seeds the replayed noise: the same seed, the same readings.
	Seed uint64
}

// point is the recording's average at one step in one direction.
type point struct {
	step motion.Steps
	fwd  float64 // nanowatts
	g2   float64 // |Γ|²
}

// Replay is a recording acting as the drive and the coupler. It is safe for concurrent use; its
// methods are cheap except Read, which sleeps on the clock.
type Replay struct {
	clk   clock.Clock
	conv  time.Duration
	name  string
	freq  physic.Frequency
	fall  bool
	hold  bool
	play  motion.Steps
	curve [2][]point // by dirIndex
	noise Noise      // the recording's, as estimated
	quiet bool       // Options.Silent

	mu      sync.Mutex
	enabled bool
	carrier bool
	rng     *rand.Rand
	base    motion.Steps     // position before the current move
	baseDir motion.Direction // direction of the last pulse before the current move
	move    motion.Move      // the current or last move; zero Profile before the first
	began   time.Time        // when move started
	end     time.Duration    // after began, when move stops emitting (early after a Stop)
}

// New returns a replay of samples on clk. The motor starts disabled, as a real driver does.
func New(clk clock.Clock, samples []record.Sample, opts Options) (*Replay, error) {
	if err := opts.check(); err != nil {
		return nil, fmt.Errorf("replay: %w", err)
	}
	r := &Replay{
		clk:     clk,
		conv:    cmp.Or(opts.Conversion, DefaultConversion),
		name:    cmp.Or(opts.Name, "replay"),
		fall:    opts.Fallback,
		hold:    opts.HoldEnds,
		play:    opts.Backlash,
		carrier: !opts.CarrierOff,
		base:    opts.Position,
		baseDir: cmp.Or(opts.Dir, motion.Up),
		began:   clk.Now(),
		quiet:   opts.Silent,
		rng:     rand.New(rand.NewPCG(opts.Seed, noiseStream)),
	}
	var err error
	if r.freq, err = pickFreq(samples, opts.Freq); err != nil {
		return nil, fmt.Errorf("replay: %w", err)
	}
	if r.curve, err = curves(samples, r.freq); err != nil {
		return nil, fmt.Errorf("replay: %w", err)
	}
	if len(r.curve[0]) == 0 && len(r.curve[1]) == 0 {
		return nil, fmt.Errorf("replay: no samples with forward power at %v: %w", r.freq, ErrNoData)
	}
	r.noise = EstimateNoise(samples, r.freq)
	return r, nil
}

// noiseStream is the second word of the noise generator's state, so that the same Seed gives
// the same readings.
const noiseStream = 0x7265706c6179

// Noise is the recording's reading noise as EstimateNoise measures it: what every reading
// carries unless Options.Silent.
func (r *Replay) Noise() Noise { return r.noise }

// curves averages the samples at freq by direction and step, each direction sorted by step.
func curves(samples []record.Sample, freq physic.Frequency) ([2][]point, error) {
	var c [2][]point
	type sum struct {
		fwd, g2 float64
		n       int
	}
	var sums [2]map[motion.Steps]*sum
	for i, s := range samples {
		if s.Dir != motion.Up && s.Dir != motion.Down {
			return c, fmt.Errorf("sample %d: direction %d is neither up nor down", i, s.Dir)
		}
		if s.Freq != freq || s.Forward <= 0 {
			continue
		}
		d := dirIndex(s.Dir)
		if sums[d] == nil {
			sums[d] = make(map[motion.Steps]*sum)
		}
		a := sums[d][s.Step]
		if a == nil {
			a = &sum{}
			sums[d][s.Step] = a
		}
		a.fwd += float64(s.Forward)
		a.g2 += sense.Reading{Forward: s.Forward, Reflected: s.Reflected}.Gamma2()
		a.n++
	}
	for d, m := range sums {
		for _, step := range slices.Sorted(maps.Keys(m)) {
			a := m[step]
			c[d] = append(c[d], point{step, a.fwd / float64(a.n), a.g2 / float64(a.n)})
		}
	}
	return c, nil
}

func (o *Options) check() error {
	var errs []error
	if o.Conversion < 0 {
		errs = append(errs, fmt.Errorf("conversion %v: want >= 0", o.Conversion))
	}
	if o.Dir != 0 && o.Dir != motion.Up && o.Dir != motion.Down {
		errs = append(errs, fmt.Errorf("dir %d: want +1 (up), -1 (down) or 0 (default up)", o.Dir))
	}
	if o.Backlash < 0 {
		errs = append(errs, fmt.Errorf("backlash %d: want >= 0", o.Backlash))
	}
	if o.Freq < 0 {
		errs = append(errs, fmt.Errorf("freq %v: want >= 0", o.Freq))
	}
	return errors.Join(errs...)
}

// pickFreq returns want if samples hold it, else (want 0) their most common frequency.
func pickFreq(samples []record.Sample, want physic.Frequency) (physic.Frequency, error) {
	count := make(map[physic.Frequency]int)
	for _, s := range samples {
		count[s.Freq]++
	}
	if len(count) == 0 {
		return 0, fmt.Errorf("recording has no samples: %w", ErrNoData)
	}
	freqs := slices.Sorted(maps.Keys(count))
	if want != 0 {
		if count[want] == 0 {
			return 0, fmt.Errorf("no samples at %v (recorded: %v): %w", want, freqs, ErrNoData)
		}
		return want, nil
	}
	best := freqs[0]
	for _, f := range freqs[1:] {
		if count[f] > count[best] {
			best = f
		}
	}
	return best, nil
}

// Frequency returns the frequency whose samples are replayed.
func (r *Replay) Frequency() physic.Frequency { return r.freq }

// Carrier switches the simulated carrier on or off; without it, readings are zero.
func (r *Replay) Carrier(on bool) {
	r.mu.Lock()
	r.carrier = on
	r.mu.Unlock()
}

// Position returns the motor position now, in the recording's steps.
func (r *Replay) Position() motion.Steps {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.positionAt(r.clk.Now())
}

// Read implements sense.Sensor.
func (r *Replay) Read(ctx context.Context) (sense.Reading, error) {
	begin := r.clk.Now()
	if err := r.clk.Sleep(ctx, r.conv); err != nil {
		return sense.Reading{}, fmt.Errorf("replay: read: %w", err)
	}
	at := begin.Add(r.conv / 2)
	r.mu.Lock()
	pos, dir, carrier := r.positionAt(at), r.dirAt(at), r.carrier
	zf, zr := r.rng.NormFloat64(), r.rng.NormFloat64()
	r.mu.Unlock()
	if !carrier {
		return sense.Reading{At: at}, nil
	}
	fwd, g2, err := r.lookup(pos, dir)
	if err != nil {
		return sense.Reading{}, fmt.Errorf("replay: read at step %d travelling %s: %w", pos, dirName(dir), err)
	}
	ref := g2 * fwd
	if !r.quiet {
		fwd *= noiseFactor(r.noise.Forward, zf)
		ref *= noiseFactor(r.noise.Reflected, zr)
	}
	return sense.Reading{
		At:        at,
		Forward:   physic.Power(math.Round(fwd)),
		Reflected: physic.Power(math.Round(ref)),
	}, nil
}

// noiseFactor is e^{σ·z}: a reading scattered by σ of its log; none below quietNoise.
func noiseFactor(sigma, z float64) float64 {
	if sigma < quietNoise {
		return 1
	}
	return math.Exp(sigma * z)
}

// lookup finds forward power and |Γ|² at step p travelling in direction d.
func (r *Replay) lookup(p motion.Steps, d motion.Direction) (fwd, g2 float64, err error) {
	own := r.curve[dirIndex(d)]
	if fwd, g2, ok := interpolate(own, p); ok {
		return fwd, g2, nil
	}
	if r.fall {
		if fwd, g2, ok := interpolate(r.curve[dirIndex(-d)], p-motion.Steps(d)*r.play); ok {
			return fwd, g2, nil
		}
	}
	if len(own) == 0 {
		return 0, 0, fmt.Errorf("never recorded in this direction at %v: %w", r.freq, ErrNoData)
	}
	if r.hold {
		end := own[0]
		if p > own[len(own)-1].step {
			end = own[len(own)-1]
		}
		return end.fwd, end.g2, nil
	}
	return 0, 0, fmt.Errorf("outside the recorded steps %d to %d: %w", own[0].step, own[len(own)-1].step, ErrNoData)
}

// interpolate reads pts (sorted by step) at p, linearly between the two nearest points.
func interpolate(pts []point, p motion.Steps) (fwd, g2 float64, ok bool) {
	i := sort.Search(len(pts), func(i int) bool { return pts[i].step >= p })
	switch {
	case i == len(pts):
		return 0, 0, false
	case pts[i].step == p:
		return pts[i].fwd, pts[i].g2, true
	case i == 0:
		return 0, 0, false
	}
	a, b := pts[i-1], pts[i]
	w := float64(p-a.step) / float64(b.step-a.step)
	return a.fwd + w*(b.fwd-a.fwd), a.g2 + w*(b.g2-a.g2), true
}

// Start implements motion.Drive.
func (r *Replay) Start(m motion.Move) error {
	if m.Dir != motion.Up && m.Dir != motion.Down {
		return fmt.Errorf("replay: start: direction %d is neither up nor down", m.Dir)
	}
	if err := m.Profile.Validate(); err != nil {
		return fmt.Errorf("replay: start: %w", err)
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	now := r.clk.Now()
	if r.runningAt(now) {
		return fmt.Errorf("replay: start: %w", ErrBusy)
	}
	if !r.enabled {
		return fmt.Errorf("replay: start: %w", ErrDisabled)
	}
	r.base, r.baseDir = r.positionAt(now), r.dirAt(now)
	r.move, r.began, r.end = m, now, m.Profile.Duration()
	return nil
}

// Progress implements motion.Drive.
func (r *Replay) Progress() (emitted int64, running bool) {
	r.mu.Lock()
	defer r.mu.Unlock()
	now := r.clk.Now()
	return r.emittedAt(now), r.runningAt(now)
}

// Stop implements motion.Drive.
func (r *Replay) Stop(ramp bool) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.stop(ramp)
}

func (r *Replay) stop(ramp bool) {
	now := r.clk.Now()
	if !r.runningAt(now) {
		return
	}
	t := now.Sub(r.began)
	if !ramp {
		r.end = t
		return
	}
	r.move.Profile = r.move.Profile.StopAt(t)
	r.end = max(r.move.Profile.Duration(), t)
}

// Enable implements motion.Drive. Releasing the motor during a move stops it at once: an
// unpowered motor follows no pulses.
func (r *Replay) Enable(on bool) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if !on {
		r.stop(false)
	}
	r.enabled = on
	return nil
}

// Halt implements motion.Drive: it stops at once and releases the motor.
func (r *Replay) Halt() error { return r.Enable(false) }

// String implements motion.Drive.
func (r *Replay) String() string { return r.name }

// The state at time t is computed from the current move, so nothing needs to run in between.

func (r *Replay) emittedAt(t time.Time) int64 {
	d := min(t.Sub(r.began), r.end)
	if d <= 0 {
		return 0 // also before the first move, when there is no profile to ask
	}
	return r.move.Profile.StepsAt(d)
}

func (r *Replay) runningAt(t time.Time) bool { return t.Sub(r.began) < r.end }

func (r *Replay) positionAt(t time.Time) motion.Steps {
	return r.base + motion.Steps(r.move.Dir)*r.emittedAt(t)
}

// dirAt is the direction of the last pulse before t: a move that has not emitted one has not
// moved the gear play yet.
func (r *Replay) dirAt(t time.Time) motion.Direction {
	if r.emittedAt(t) > 0 {
		return r.move.Dir
	}
	return r.baseDir
}

func dirIndex(d motion.Direction) int {
	if d < 0 {
		return 1
	}
	return 0
}

func dirName(d motion.Direction) string {
	if d < 0 {
		return "down"
	}
	return "up"
}
