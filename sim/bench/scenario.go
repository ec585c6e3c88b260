package bench

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/band"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/vclock"
)

// MapState says what the controller knows before the measured tune.
type MapState string

// Map states.
const (
	Cold MapState = "cold" // an empty memory map: only the physics prior from the description
	Warm MapState = "warm" // calibrated backlash and a map learned from earlier tunes
)

// Scenario is one benchmark case: a station as it really is and as it was described, the
// frequency to tune, and, warm, the tunes that went before.
type Scenario struct {
	ID        int
	Seed      uint64
	Base      string              // which station it was drawn from
	Truth     sim.Spec            // the simulated station
	Described station.Description // what the controller is told
	Map       MapState
	Freq      physic.Frequency
	Band      string
	// History: warm only, the frequencies tuned before, oldest first, and when.
	History []Visit
	// Start is the virtual time the scenario begins (the first history tune, or the tune).
	Start time.Time
	// At is when the measured tune starts.
	At time.Time
	// Jitter: the scheduling jitter the rig runs with (Knobs.Jitter); zero: none.
	Jitter Jitter
	// Nominal is the gear play the controller is told to assume before it has calibrated: an
	// upper bound of the range the true play was drawn from (see Knobs.backlash).
	Nominal int64
}

// Visit is one earlier tune.
type Visit struct {
	Freq physic.Frequency
	At   time.Time
}

// Knobs are the ranges the scenarios are drawn from. Each simulator knob of a station is drawn
// from its range unless the station's file sets it (Fixed); the draw is made either way, so that
// fixing one knob leaves every other draw of the scenario as it was.
type Knobs struct {
	Bands    []string   // bands to draw frequencies from; default 160m, 80m, 40m
	Noise    [2]float64 // ADC noise multiplier range (log-uniform); default 0.5–4
	Backlash [2]float64 // true gear play, steps; default 0–100
	MissRate float64    // largest per-pulse loss probability (half the scenarios get one, log-uniform from a hundredth of it); default 1e-5
	// Drift is the largest daily temperature swing as the weather's swing_k has it, half the
	// day's peak-to-peak, K (drawn uniformly from 0); the slow wander on top is drawn up to a
	// quarter of it. Default 8.
	Drift       float64
	Directivity [2]float64 // coupler directivity range, dB; default 22–35
	Perturb     bool       // the truth differs from the description (strays, inductance, capacitor); default on for built-in presets
	History     [2]int     // warm: number of earlier tunes; default 6–10
	// Jitter, if set, gives each scenario's rig the jitter it returns for the scenario's seed
	// (LoadedBoard, HeavyLoad): a test mode, default off.
	Jitter func(seed uint64) Jitter
	// StationBacklash replaces Backlash for the named stations, whose drive makes the common
	// range meaningless (a direct drive has a coupling's play, not a gearbox's).
	StationBacklash map[string][2]float64
	// Fixed names, per station, the keys its station file sets ("drive.backlash_steps",
	// "simulator.coupler.directivity_db", …; see DrawnKeys): those keep the file's value.
	Fixed map[string]map[string]bool
}

// DefaultKnobs are the benchmark's standard ranges.
func DefaultKnobs() Knobs {
	return Knobs{
		Bands: []string{"160m", "80m", "40m"}, Noise: [2]float64{0.5, 4}, Backlash: [2]float64{0, 100},
		MissRate: 1e-5, Drift: 8, Directivity: [2]float64{22, 35}, Perturb: true, History: [2]int{6, 10},
	}
}

// backlash is the range station's true play is drawn from.
func (k Knobs) backlash(station string) [2]float64 {
	if b, ok := k.StationBacklash[station]; ok {
		return b
	}
	return k.Backlash
}

// nominal is what the controller is told of station's play before it calibrates: an upper
// bound over the range the play is drawn from, and nominalMargin more.
func (k Knobs) nominal(station string) int64 { return int64(k.backlash(station)[1]) + nominalMargin }

// nominalMargin is how far above the worst play the bound the controller is told lies, steps:
// a builder rounds an estimate up (a judgement).
const nominalMargin = 20

// Generate draws n scenarios from the stations, deterministically from seed.
func Generate(stations map[string]sim.Spec, names []string, n int, seed uint64, m MapState, k Knobs) ([]Scenario, error) {
	if len(names) == 0 {
		return nil, fmt.Errorf("bench: no stations")
	}
	// Bands each station can tune within its soft limits.
	covered := map[string][]band.Band{}
	for _, name := range names {
		for _, bn := range k.Bands {
			b, err := band.Named(bn)
			if err != nil {
				return nil, err
			}
			if tunable(stations[name], b, k.nominal(name)) {
				covered[name] = append(covered[name], b)
			}
		}
		if len(covered[name]) == 0 {
			return nil, fmt.Errorf("bench: station %q tunes none of the bands %v", name, k.Bands)
		}
	}
	out := make([]Scenario, n)
	var err error
	for i := range n {
		r := rand.New(rand.NewPCG(seed, uint64(i)))
		name := names[r.IntN(len(names))]
		truth := stations[name]
		truth.Simulator.Seed = r.Uint64()
		desc := truth.Description
		draw(r, &truth, k, name)
		bands := covered[name]
		sc := Scenario{ID: i, Seed: truth.Simulator.Seed, Base: name, Truth: truth, Described: desc, Map: m,
			Nominal: k.nominal(name)}
		if k.Jitter != nil {
			// From the scenario's seed, not from r: switching jitter on must not change the
			// scenarios themselves.
			sc.Jitter = k.Jitter(sc.Seed)
		}
		b := bands[r.IntN(len(bands))]
		sc.Band = b.Name
		if sc.Freq, err = reachableIn(r, truth, desc, b, sc.Nominal); err != nil {
			return nil, fmt.Errorf("bench: scenario %d: %w", i, err)
		}
		day := vclock.Epoch.Add(time.Duration(r.IntN(365*24)) * time.Hour).Add(time.Duration(r.IntN(3600)) * time.Second)
		sc.Start, sc.At = day, day
		if m == Warm {
			nh := k.History[0] + r.IntN(k.History[1]-k.History[0]+1)
			at := day
			// An operator works the bands the loop covers: each of them at least twice, in a
			// random order, then wherever chance takes them.
			var plan []band.Band
			for range 2 {
				plan = append(plan, bands...)
			}
			r.Shuffle(len(plan), func(i, j int) { plan[i], plan[j] = plan[j], plan[i] })
			for j := range max(nh, len(plan)) {
				hb := bands[r.IntN(len(bands))]
				if j < len(plan) {
					hb = plan[j]
				}
				hf, err := reachableIn(r, truth, desc, hb, sc.Nominal)
				if err != nil {
					return nil, fmt.Errorf("bench: scenario %d: %w", i, err)
				}
				sc.History = append(sc.History, Visit{Freq: hf, At: at})
				at = at.Add(time.Duration(5+r.IntN(55)) * time.Minute)
			}
			sc.At = at.Add(time.Duration(1+r.IntN(29)) * time.Minute)
		}
		out[i] = sc
	}
	return out, nil
}

// draw perturbs the truth of the named station within the knobs. Every draw is made whether
// or not the station's file fixes its key, so the stream stays the same.
func draw(r *rand.Rand, s *sim.Spec, k Knobs, name string) {
	logU := func(lo, hi float64) float64 { return lo * math.Pow(hi/lo, r.Float64()) }
	uni := func(lo, hi float64) float64 { return lo + (hi-lo)*r.Float64() }
	fixed := k.Fixed[name]
	set := func(key string, dst *float64, v float64) {
		if !fixed[key] {
			*dst = v
		}
	}
	sm := &s.Simulator
	set(keyNoise, &sm.Coupler.ADCNoiseMV, sm.Coupler.ADCNoiseMV*logU(k.Noise[0], k.Noise[1]))
	bl := k.backlash(name)
	set(keyBacklash, &s.Drive.BacklashSteps, math.Round(uni(bl[0], bl[1])))
	if k.MissRate > 0 && r.IntN(2) == 0 {
		set(keyMissRate, &sm.Drive.MissRate, logU(k.MissRate/100, k.MissRate))
	}
	set(keySwing, &sm.Weather.SwingK, uni(0, k.Drift))
	set(keyWander, &sm.Weather.WanderK, uni(0, k.Drift/4))
	set(keyPeakHour, &sm.Weather.PeakHour, uni(12, 16))
	set(keyDirectivity, &sm.Coupler.DirectivityDB, uni(k.Directivity[0], k.Directivity[1]))
	set(keyLeakPhase, &sm.Coupler.LeakPhaseDeg, uni(0, 360))
	if k.Perturb {
		// A loop is never quite its drawing: strays, the exact size, the capacitor's range.
		s.Loop.StrayPF *= uni(0.7, 1.3)
		s.Loop.DiameterM *= uni(0.99, 1.01)
		s.Capacitor.MinPF *= uni(0.95, 1.05)
		s.Capacitor.MaxPF *= uni(0.97, 1.03)
		s.Loop.ExtraLossOhm *= uni(0.7, 1.5)
	}
}

// freqIn draws a frequency inside b, a few kHz clear of its edges, on a 10 Hz grid.
func freqIn(r *rand.Rand, b band.Band) physic.Frequency {
	lo, hi := Hz(b.Low)+2000, Hz(b.High)-2000
	return physic.Frequency(math.Round((lo+(hi-lo)*r.Float64())/10)*10) * physic.Hertz
}

// tunable says whether the described station reaches some of band b inside its soft limits.
func tunable(s sim.Spec, b band.Band, nominal int64) bool {
	return inLimits(s, s.Description, b.Low, nominal) || inLimits(s, s.Description, b.High, nominal)
}

// approachClearance is the room, beyond the play the controller assumes before calibrating,
// that a dip needs from a soft limit: a fine sweep starts below the dip and an approach runs up
// from below that (a judgement: a few dip widths of the widest loops).
const approachClearance = 100

// inLimits says whether the true station's dip at f lies inside the described soft limits,
// clear of the strip an approach needs behind it: at least the nominal play and the clearance.
func inLimits(truth sim.Spec, desc station.Description, f physic.Frequency, nominal int64) bool {
	// the truth's own physics at its weather's mean temperature: where the dip really is
	p, err := truth.Prior(truth.Simulator.Weather.MeanC)
	if err != nil {
		return false
	}
	pr, ok := p.Predict(f)
	if !ok {
		return false
	}
	lo, hi := desc.SoftLimits()
	margin := max(1.5*desc.Drive.BacklashSteps+150+0.002*float64(hi-lo), float64(nominal+approachClearance))
	return pr.Pos > float64(lo)+margin && pr.Pos < float64(hi)-margin
}

// reachableIn draws a frequency in b that the true station can tune within the described soft
// limits (the benchmark asks what the controller does with a tunable frequency; one beyond the
// capacitor is a different question).
func reachableIn(r *rand.Rand, truth sim.Spec, desc station.Description, b band.Band, nominal int64) (physic.Frequency, error) {
	for range 50 {
		f := freqIn(r, b)
		if inLimits(truth, desc, f, nominal) {
			return f, nil
		}
	}
	return 0, fmt.Errorf("no frequency in %s is tunable on %q", b.Name, truth.Name)
}
