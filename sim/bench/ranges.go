package bench

import (
	"fmt"
	"sort"
	"strings"

	"github.com/BurntSushi/toml"

	"github.com/tankd/tankd/controller/physics/capacitor"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/sim"
)

// The named sets of ranges (Options.Ranges, tanksim bench -ranges).
const (
	// StandardRanges are DefaultKnobs on the built-in presets: the ranges of the benchmark's
	// first published figures, kept so that a change to the controller can be compared with
	// them.
	StandardRanges = "standard"
	// HarshRanges are HarshKnobs on the presets and HarshKinds: stations and conditions that
	// the standard ranges leave out, each seen at a real station (see HarshKnobs).
	HarshRanges = "harsh"
)

// RangeNames are the named sets, in the order the help lists them.
var RangeNames = []string{StandardRanges, HarshRanges}

// RangesNamed returns the knobs and the stations of a named set of ranges.
func RangesNamed(name string) (Knobs, map[string]sim.Spec, error) {
	switch name {
	case StandardRanges, "":
		return DefaultKnobs(), sim.Presets(), nil
	case HarshRanges:
		st := sim.Presets()
		for n, s := range HarshKinds() {
			st[n] = s
		}
		return HarshKnobs(), st, nil
	}
	return Knobs{}, nil, fmt.Errorf("bench: ranges %q: want %s", name, strings.Join(RangeNames, " or "))
}

// HarshKnobs widen the standard ranges to what stations meet in the field:
//
//   - gear play up to 400 steps (a worn worm or a cheap planetary gearbox at 16 microsteps is
//     several hundred microsteps of play at the motor; from memory);
//   - couplers down to 17 dB of directivity (a home-wound tandem match without compensation),
//     with up to ten times the converter's nominal noise (a long unscreened cable to the
//     detectors; on log detectors ten times 0.6 mV is a quarter of a dB);
//   - daily swings up to 10 K either side of the mean, 20 K from dawn to afternoon (a loop in
//     the sun on a dry day; from memory), with a slow wander of up to 2.5 K on top;
//   - lost steps ten times as often (up to one pulse in ten thousand in half the scenarios: a
//     motor driven close to its pull-out torque);
//
// on the presets and on HarshKinds (a small loop whose dip is a few steps wide, a vacuum
// variable without a home switch, a loop badly matched at the ends of its range); the small
// loop's direct drive gets a coupling's play, 0–16 steps (half a degree at 64 microsteps),
// instead of a gearbox's.
func HarshKnobs() Knobs {
	k := DefaultKnobs()
	k.Noise = [2]float64{0.5, 10}
	k.Backlash = [2]float64{0, 400}
	k.MissRate = 1e-4
	k.Drift = 10
	k.Directivity = [2]float64{17, 35}
	k.StationBacklash = map[string][2]float64{KindSmallLoop: {0, 16}}
	return k
}

// The station kinds HarshRanges add to the presets.
const (
	KindSmallLoop     = "small-loop"
	KindVacuumNoHome  = "vacuum-nohome"
	KindPoorMatchLoop = "poor-match"
)

// HarshKinds are stations the presets leave out, each derived from a preset's simulation (the
// figures are typical of such builds, not measured):
//
//   - small-loop: a one-turn 1 m loop of 15 mm tube on an 8–250 pF air variable turned directly
//     by a motor at 64 microsteps (12,800 steps a turn). It tunes 40 m only, where the loop's
//     bandwidth is a few steps of the drive: the SWR is below 2 over three or four steps.
//   - vacuum-nohome: the vacuum preset without its home switch: hard end stops, and a position
//     that only the operator can restore once lost.
//   - poor-match: the demo loop with a coupling loop matched at 3.6 MHz that does poorly an
//     octave either side (an SWR of 1.8 at 1.8 and 7.2 MHz): at the ends of its range the best
//     achievable SWR is near the controller's target of 2.
func HarshKinds() map[string]sim.Spec {
	out := map[string]sim.Spec{}

	small := sim.DefaultSpec()
	d := &small.Description
	d.Name = "one-turn 1 m loop, 8–250 pF air variable, direct drive"
	d.Loop = station.Loop{Turns: 1, DiameterM: 1.0, ConductorM: 0.015, SpacingM: d.Loop.SpacingM,
		ExtraLossOhm: 0.01, StrayPF: 3}
	d.Feed = station.Feed{DesignHz: 7.1e6, OctaveSWR: 1.3}
	d.Capacitor = station.Capacitor{MinPF: 8, MaxPF: 250, Travel: capacitor.Free.String(), SpanTurns: 0.5,
		TempPPMPerK: 30, EndMarginPct: 0.5}
	d.Drive = station.Drive{StepsPerRev: 200, Microsteps: 64, GearRatio: 1, BacklashSteps: 8,
		MaxSpeed: 8000, Accel: 40000, SettleMS: 10}
	small.Simulator.Seed = 4
	small.Simulator.Drive = sim.DriveSpec{PulloutSpeed: 12000, MaxAccel: 80000, SettleSteps: 0.5}
	small.Simulator.Radio.FrequencyHz = 7.1e6
	out[KindSmallLoop] = small

	vac, _ := sim.Preset("vacuum")
	vac.Description.Name += ", no home switch"
	vac.Drive.Home = nil
	vac.Simulator.Seed = 5
	out[KindVacuumNoHome] = vac

	poor := sim.DefaultSpec()
	poor.Description.Name = "demo loop, coupling matched at 3.6 MHz only"
	poor.Feed = station.Feed{DesignHz: 3.6e6, OctaveSWR: 1.8}
	poor.Simulator.Seed = 6
	out[KindPoorMatchLoop] = poor
	return out
}

// The station-file keys the generator draws (Knobs, draw).
const (
	keyNoise       = "simulator.coupler.adc_noise_mv"
	keyBacklash    = "drive.backlash_steps"
	keyMissRate    = "simulator.drive.miss_rate"
	keySwing       = "simulator.weather.swing_k"
	keyWander      = "simulator.weather.wander_k"
	keyPeakHour    = "simulator.weather.peak_hour"
	keyDirectivity = "simulator.coupler.directivity_db"
	keyLeakPhase   = "simulator.coupler.leak_phase_deg"
)

// DrawnKeys are the station-file keys the generator draws for each scenario unless the file
// sets them.
var DrawnKeys = []string{keyNoise, keyBacklash, keyMissRate, keySwing, keyWander, keyPeakHour, keyDirectivity, keyLeakPhase}

// perturbed are the keys -perturb changes in the truth (the controller is told the file's).
var perturbed = []string{"loop.stray_pf", "loop.diameter_m", "capacitor.min_pf", "capacitor.max_pf", "loop.extra_loss_ohm"}

// Draw is one value the generator draws for a station's scenarios, and the range it is drawn
// from.
type Draw struct {
	Station string `json:"station"`
	Key     string `json:"key"`
	Range   string `json:"range"`
}

// Drawn lists, station by station, the values the knobs draw for each scenario: every key of
// DrawnKeys that the station's file leaves out, and, with Perturb, the loop's values that the
// simulated truth takes apart from its description.
func Drawn(stations map[string]sim.Spec, names []string, k Knobs) []Draw {
	var out []Draw
	for _, name := range names {
		s := stations[name]
		for _, key := range DrawnKeys {
			if k.Fixed[name][key] {
				continue
			}
			out = append(out, Draw{Station: name, Key: key, Range: k.rangeOf(name, key, s)})
		}
		if k.Perturb {
			for i, key := range perturbed {
				out = append(out, Draw{Station: name, Key: key, Range: perturbRanges[i] + " of the description's, in the truth only"})
			}
		}
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Station < out[j].Station })
	return out
}

// perturbRanges are the factors of draw's perturbation, in the order of perturbed.
var perturbRanges = []string{"×0.7–1.3", "×0.99–1.01", "×0.95–1.05", "×0.97–1.03", "×0.7–1.5"}

// rangeOf describes the range key is drawn from for station s.
func (k Knobs) rangeOf(name, key string, s sim.Spec) string {
	switch key {
	case keyNoise:
		return fmt.Sprintf("%g mV × %g–%g, log-uniform", s.Simulator.Coupler.ADCNoiseMV, k.Noise[0], k.Noise[1])
	case keyBacklash:
		b := k.backlash(name)
		return fmt.Sprintf("%g–%g steps, uniform, whole steps", b[0], b[1])
	case keyMissRate:
		if k.MissRate == 0 {
			return fmt.Sprintf("the station's, %.3g", s.Simulator.Drive.MissRate)
		}
		return fmt.Sprintf("%.3g–%.3g, log-uniform, in half the scenarios (the station's %.3g in the others)",
			k.MissRate/100, k.MissRate, s.Simulator.Drive.MissRate)
	case keySwing:
		return fmt.Sprintf("0–%g K, uniform", k.Drift)
	case keyWander:
		return fmt.Sprintf("0–%g K, uniform", k.Drift/4)
	case keyPeakHour:
		return "12–16 h, uniform"
	case keyDirectivity:
		return fmt.Sprintf("%g–%g dB, uniform", k.Directivity[0], k.Directivity[1])
	case keyLeakPhase:
		return "0–360°, uniform"
	}
	return ""
}

// LoadStation reads a station file for the benchmark (sim.LoadSpec) and says which of the keys
// the generator draws (DrawnKeys) the file sets: those the scenarios keep (Knobs.Fixed).
func LoadStation(path string) (sim.Spec, map[string]bool, error) {
	s, err := sim.LoadSpec(path)
	if err != nil {
		return sim.Spec{}, nil, err
	}
	var raw map[string]any
	md, err := toml.DecodeFile(path, &raw)
	if err != nil {
		return sim.Spec{}, nil, fmt.Errorf("station description %s: %w", path, err)
	}
	fixed := map[string]bool{}
	for _, key := range DrawnKeys {
		if md.IsDefined(strings.Split(key, ".")...) {
			fixed[key] = true
		}
	}
	return s, fixed, nil
}
