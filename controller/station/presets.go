package station

import (
	"fmt"
	"sort"
	"strings"

	"github.com/tankd/tankd/controller/physics/capacitor"
	"github.com/tankd/tankd/controller/sense"
)

// Presets are the example stations of configs/stations/<name>.toml, as descriptions: the demo
// station, a vacuum variable between hard stops with a home switch, and a butterfly capacitor
// with diode detectors and no switch.
func Presets() map[string]Description {
	return map[string]Description{
		"default":   DefaultDescription(),
		"vacuum":    vacuumDescription(),
		"butterfly": butterflyDescription(),
	}
}

// PresetNames are the presets' names, sorted.
func PresetNames() []string {
	p := Presets()
	names := make([]string, 0, len(p))
	for n := range p {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// Preset returns the named preset.
func Preset(name string) (Description, error) {
	if d, ok := Presets()[name]; ok {
		return d, nil
	}
	return Description{}, fmt.Errorf("station preset %q: want one of %s", name, strings.Join(PresetNames(), ", "))
}

// The presets' leads and fittings across the capacitor, besides the winding's own capacitance
// (guesses: a few pF). A vacuum variable sits in the gap on short straps; a butterfly's two
// stators are strapped to the loop's ends. The windings add about 7 pF (the one-turn 1.6 m
// ring) and 16 pF (the three-turn 1 m loop) of their own (loop.Geometry.SelfCapacitance).
const (
	vacuumLeadsPF    = 2
	butterflyLeadsPF = 3
)

// vacuumDescription is a single-turn 1.6 m loop on a 5–500 pF vacuum variable with hard end
// stops (12 turns of the shaft), driven through a 3:1 belt, with a home switch near minimum
// capacitance: a loop for 80 m to 30 m (common practice; the figures are typical, not measured).
func vacuumDescription() Description {
	d := DefaultDescription()
	d.Name = "one-turn 1.6 m loop, 5–500 pF vacuum variable"
	d.Loop = Loop{Turns: 1, DiameterM: 1.6, ConductorM: 0.028, SpacingM: d.Loop.SpacingM, ExtraLossOhm: 0.01, StrayPF: vacuumLeadsPF}
	d.Feed = Feed{DesignHz: 7e6, OctaveSWR: 1.3}
	d.Capacitor = Capacitor{MinPF: 5, MaxPF: 500, Travel: capacitor.Stops.String(), SpanTurns: 12, TempPPMPerK: 20, EndMarginPct: 2}
	d.Drive = Drive{StepsPerRev: 200, Microsteps: 8, GearRatio: 3, BacklashSteps: 6,
		MaxSpeed: 12000, Accel: 40000, SettleMS: 8, Home: &Switch{AtTurns: 0.1, HysteresisSteps: 8}}
	return d
}

// butterflyDescription is a three-turn 1 m loop for 160 m and 80 m on a 20–500 pF butterfly
// capacitor that turns freely with no switch (its range repeats every quarter turn), diode
// detectors behind a 20 dB coupler, and a sloppy gearbox: the hard case, where re-referencing
// needs the dip itself.
func butterflyDescription() Description {
	d := DefaultDescription()
	d.Name = "three-turn 1 m loop, butterfly capacitor, diode detectors"
	d.Loop = Loop{Turns: 3, DiameterM: 1.0, ConductorM: 0.015, SpacingM: 0.05, ExtraLossOhm: 0.02, StrayPF: butterflyLeadsPF}
	d.Feed = Feed{DesignHz: 2.5e6, OctaveSWR: 1.5}
	d.Capacitor = Capacitor{MinPF: 20, MaxPF: 500, Travel: capacitor.Free.String(), SpanTurns: 0.25, TempPPMPerK: 40, EndMarginPct: 0.5}
	d.Drive = Drive{StepsPerRev: 200, Microsteps: 16, GearRatio: 100, BacklashSteps: 90,
		MaxSpeed: 20000, Accel: 80000, SettleMS: 20}
	d.Coupler.CouplingDB, d.Coupler.Detector = 20, sense.SquareLaw.String()
	d.Coupler.SensitivityVW, d.Coupler.MaxVolts = 50, 3.2
	return d
}
