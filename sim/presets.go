package sim

import (
	"fmt"
	"sort"
	"strings"
)

// Presets are the example stations of configs/station-<name>.toml, built in so that the
// benchmark and the tools run without files. A test keeps each in step with its file.
func Presets() map[string]Spec {
	return map[string]Spec{
		"default":   DefaultSpec(),
		"vacuum":    vacuumSpec(),
		"butterfly": butterflySpec(),
	}
}

// Preset returns the named preset.
func Preset(name string) (Spec, error) {
	p := Presets()
	if s, ok := p[name]; ok {
		return s, nil
	}
	names := make([]string, 0, len(p))
	for n := range p {
		names = append(names, n)
	}
	sort.Strings(names)
	return Spec{}, fmt.Errorf("station preset %q: want one of %s", name, strings.Join(names, ", "))
}

func vacuumSpec() Spec {
	s := DefaultSpec()
	s.Name = "one-turn 1.6 m loop, 5–500 pF vacuum variable"
	s.Seed = 2
	s.Loop = LoopSpec{Turns: 1, DiameterM: 1.6, ConductorM: 0.028, SpacingM: s.Loop.SpacingM, ExtraLossOhm: 0.01, StrayPF: 6}
	s.Feed = FeedSpec{DesignHz: 7e6, OctaveSWR: 1.3}
	s.Capacitor = CapacitorSpec{MinPF: 5, MaxPF: 500, Travel: "stops", SpanTurns: 12, TempPPMPerK: 20, EndMarginPct: 2}
	s.Drive = DriveSpec{StepsPerRev: 200, Microsteps: 8, GearRatio: 3, BacklashSteps: 6,
		MaxSpeed: 12000, Accel: 40000, PulloutSpeed: 18000, MaxAccel: 100000,
		SettleMS: 8, SettleSteps: 0.5, Home: &Switch{AtTurns: 0.1, HysteresisSteps: 8}}
	s.Radio.FrequencyHz = 7.1e6
	return s
}

func butterflySpec() Spec {
	s := DefaultSpec()
	s.Name = "three-turn 1 m loop, butterfly capacitor, diode detectors"
	s.Seed = 3
	s.Loop = LoopSpec{Turns: 3, DiameterM: 1.0, ConductorM: 0.015, SpacingM: 0.05, ExtraLossOhm: 0.02, StrayPF: 12}
	s.Feed = FeedSpec{DesignHz: 2.5e6, OctaveSWR: 1.5}
	s.Capacitor = CapacitorSpec{MinPF: 20, MaxPF: 500, Travel: "free", SpanTurns: 0.25, TempPPMPerK: 40, EndMarginPct: 0.5}
	s.Drive = DriveSpec{StepsPerRev: 200, Microsteps: 16, GearRatio: 100, BacklashSteps: 90,
		MaxSpeed: 20000, Accel: 80000, PulloutSpeed: 30000, MaxAccel: 200000,
		SettleMS: 20, SettleSteps: 3}
	c := &s.Coupler
	c.CouplingDB, c.DirectivityDB, c.Detector = 20, 25, "square"
	c.SensitivityVW, c.MaxVolts = 50, 3.2
	c.ADCBits, c.ADCFullScaleV, c.ADCNoiseMV, c.ConversionUS, c.Simultaneous = 12, 3.3, 1.0, 250, true
	s.Radio.FrequencyHz = 1.85e6
	return s
}
