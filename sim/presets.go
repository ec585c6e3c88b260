package sim

import (
	"fmt"
	"strings"

	"github.com/tankd/tankd/controller/station"
)

// Presets are the example stations of configs/stations/<name>.toml, built in so that the
// benchmark and the tools run without files: the station presets (station.Presets), each with
// the simulator's knobs for it. A test keeps each in step with its file.
func Presets() map[string]Spec {
	out := map[string]Spec{}
	for name, d := range station.Presets() {
		s := DefaultSpec()
		s.Description = d
		switch name {
		case "vacuum":
			s.Simulator.Seed = 2
			s.Simulator.Drive = DriveSpec{PulloutSpeed: 18000, MaxAccel: 100000, SettleSteps: 0.5}
			s.Simulator.Radio.FrequencyHz = 7.1e6
		case "butterfly":
			s.Simulator.Seed = 3
			s.Simulator.Drive = DriveSpec{PulloutSpeed: 30000, MaxAccel: 200000, SettleSteps: 3}
			c := &s.Simulator.Coupler
			c.DirectivityDB = 25
			c.ADCBits, c.ADCFullScaleV, c.ADCNoiseMV, c.ConversionUS, c.Simultaneous = 12, 3.3, 1.0, 250, true
			s.Simulator.Radio.FrequencyHz = 1.85e6
		}
		out[name] = s
	}
	return out
}

// Preset returns the named preset.
func Preset(name string) (Spec, error) {
	if s, ok := Presets()[name]; ok {
		return s, nil
	}
	return Spec{}, fmt.Errorf("station preset %q: want one of %s", name, strings.Join(station.PresetNames(), ", "))
}
