package sim

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"time"

	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/sim/coupler"
	"github.com/tankd/tankd/sim/env"
)

// Spec is a simulated station: the station as it really is, described as the controller's
// station.Description describes one (its keys sit at the top level of the TOML, as in a
// description file), and the simulator's own knobs, in [simulator], for what a description does
// not say: how the motor misbehaves, the coupler's directivity and the ADC, the weather, the
// radio, and the seed of every random draw. Read from TOML (see configs/ for annotated
// examples); the design calculator, the benchmark, tanksim and the daemon's simulator share it.
//
// The embedded description is the truth. The controller is usually told the same description;
// the benchmark tells it another one (a loop is never quite its drawing) and keeps this one as
// the truth.
type Spec struct {
	station.Description
	Simulator Simulator `toml:"simulator"`
}

// Simulator is the simulator's own part of a Spec.
type Simulator struct {
	Seed    uint64      `toml:"seed"`
	Drive   DriveSpec   `toml:"drive"`
	Coupler CouplerSpec `toml:"coupler"`
	Weather WeatherSpec `toml:"weather"`
	Radio   RadioSpec   `toml:"radio"`
}

// DriveSpec is how the simulated motor and gearing really behave beyond their description.
type DriveSpec struct {
	PulloutSpeed float64 `toml:"pullout_sps"`            // speed above which the motor loses steps
	MaxAccel     float64 `toml:"max_accel_sps2"`         // steepest ramp it follows
	MissRate     float64 `toml:"miss_rate"`              // probability that any pulse is lost
	SettleSteps  float64 `toml:"settle_amplitude_steps"` // ringing after a move, steps
}

// CouplerSpec is the simulated coupler's imperfection and the ADC that reads its detectors
// (the detectors follow the description's calibration exactly).
type CouplerSpec struct {
	DirectivityDB float64 `toml:"directivity_db"`
	LeakPhaseDeg  float64 `toml:"leak_phase_deg"`
	ADCBits       int     `toml:"adc_bits"`
	ADCFullScaleV float64 `toml:"adc_full_scale_v"`
	ADCNoiseMV    float64 `toml:"adc_noise_mv"`
	ConversionUS  float64 `toml:"conversion_us"`
	Simultaneous  bool    `toml:"simultaneous"`
}

// WeatherSpec is the weather (see env.Options).
type WeatherSpec struct {
	MeanC    float64 `toml:"mean_c"`
	SwingK   float64 `toml:"swing_k"`
	PeakHour float64 `toml:"peak_hour"`
	WanderK  float64 `toml:"wander_k"`
}

// RadioSpec is the simulated radio.
type RadioSpec struct {
	FrequencyHz float64 `toml:"frequency_hz"`
	MaxPowerW   float64 `toml:"max_power_w"`
	// KeyUpMS is how long after a key the carrier reaches the antenna, and UnkeyMS how long it
	// stays after an unkey, ms; 0: at once (radio.Opts.KeyUp, radio.Opts.Unkey).
	KeyUpMS float64 `toml:"key_up_ms"`
	UnkeyMS float64 `toml:"unkey_ms"`
}

// DefaultSpec is the demo station (station.DefaultDescription) simulated: a motor that pulls
// out at one and a half times the planned speed, log detectors behind a coupler of 30 dB
// directivity read by a 16-bit converter used single-ended, a temperate day's weather, and a
// 100 W radio on 80 m. Typical amateur builds (common practice); the figures that are guesses
// are marked in configs/stations/default.toml.
func DefaultSpec() Spec {
	return Spec{
		Description: station.DefaultDescription(),
		Simulator: Simulator{
			Seed:  1,
			Drive: DriveSpec{PulloutSpeed: 24000, MaxAccel: 200000, SettleSteps: 1.5},
			Coupler: CouplerSpec{DirectivityDB: 30, LeakPhaseDeg: 60,
				ADCBits: 15, ADCFullScaleV: 4.096, ADCNoiseMV: 0.6, ConversionUS: 1163},
			Weather: WeatherSpec{MeanC: 12, SwingK: 5, PeakHour: 14, WanderK: 1},
			Radio:   RadioSpec{FrequencyHz: 3.75e6, MaxPowerW: 100, KeyUpMS: 30, UnkeyMS: 10},
		},
	}
}

// LoadSpec reads a TOML station file from path, on top of DefaultSpec: keys left out keep the
// demo station's values. Unknown keys are an error (a typo must not pass silently). A plain
// station description (no [simulator]) is a station file too.
func LoadSpec(path string) (Spec, error) {
	f, err := os.Open(path)
	if err != nil {
		return Spec{}, fmt.Errorf("station description: %w", err)
	}
	defer f.Close()
	s, err := ParseSpec(f)
	if err != nil {
		return Spec{}, fmt.Errorf("station description %s: %w", path, err)
	}
	return s, nil
}

// ParseSpec reads a TOML station file on top of DefaultSpec and validates it.
func ParseSpec(r io.Reader) (Spec, error) {
	s := DefaultSpec()
	if err := station.Decode(r, &s); err != nil {
		return Spec{}, err
	}
	if err := s.Validate(); err != nil {
		return Spec{}, err
	}
	return s, nil
}

// CouplerOptions are the simulated coupler's and ADC's options.
func (s Spec) CouplerOptions() (coupler.Options, error) {
	cal, err := s.Calibration()
	if err != nil {
		return coupler.Options{}, err
	}
	c := s.Simulator.Coupler
	return coupler.Options{
		CouplingDB: cal.CouplingDB, DirectivityDB: c.DirectivityDB, LeakPhase: c.LeakPhaseDeg * math.Pi / 180,
		Forward: cal.Forward, Reflected: cal.Reflected, Seed: s.Simulator.Seed ^ 0x636f7570,
		ADC: coupler.ADCOptions{Bits: c.ADCBits, FullScale: c.ADCFullScaleV, Noise: c.ADCNoiseMV / 1000,
			Conversion: s.Conversion(), Simultaneous: c.Simultaneous},
	}, nil
}

// EnvOptions are the simulated weather's options.
func (s Spec) EnvOptions() env.Options {
	w := s.Simulator.Weather
	return env.Options{Mean: w.MeanC, Swing: w.SwingK, PeakHour: w.PeakHour, Wander: w.WanderK, Seed: s.Simulator.Seed ^ 0x776561}
}

// RF builds the loop's RF model from the description.
func (s Spec) RF() (*RF, error) {
	c, err := s.CapacitorModel()
	if err != nil {
		return nil, err
	}
	return NewRF(s.Model(), s.FeedModel(), c)
}

// Conversion is the ADC's conversion time per channel.
func (s Spec) Conversion() time.Duration {
	return time.Duration(s.Simulator.Coupler.ConversionUS * float64(time.Microsecond))
}

// Validate reports every problem at once, each with its key and the accepted range: the
// description's (station.Description.Validate) and the simulator's keys, each against its
// range (KeyRange). When all of that passes, the simulated parts' own validation runs too, so
// that a station that validates is one NewStation can build.
func (s Spec) Validate() error {
	var errs []error
	if err := s.Description.Validate(); err != nil {
		if j, ok := err.(interface{ Unwrap() []error }); ok {
			errs = append(errs, j.Unwrap()...) // one error per problem, as the description's
		} else {
			errs = append(errs, err)
		}
	}
	kerrs, _ := station.CheckKeys(s.Simulator, "simulator", KeyRange)
	errs = append(errs, kerrs...)
	if len(errs) > 0 {
		return errors.Join(errs...)
	}
	if co, err := s.CouplerOptions(); err != nil {
		errs = append(errs, fmt.Errorf("simulator.coupler: %w", err))
	} else if err := co.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("simulator.coupler: %w", err))
	}
	if err := s.EnvOptions().Validate(); err != nil {
		errs = append(errs, fmt.Errorf("simulator.weather: %w", err))
	}
	return errors.Join(errs...)
}

// KeyRange returns the accepted range of a numeric key of a station file: the description's
// keys (station.KeyRange) and the simulator's, e.g. "simulator.coupler.adc_noise_mv"; ok is
// false for a key that has none.
func KeyRange(key string) (r station.Range, ok bool) {
	if r, ok = station.KeyRange(key); ok {
		return r, true
	}
	r, ok = simulatorRanges()[key]
	return r, ok
}

func simulatorRanges() map[string]station.Range {
	return map[string]station.Range{
		"simulator.seed": {Min: 0, Max: math.MaxUint64},

		// Speeds and ramps up to what a microstepping driver can pulse, about 1e6 steps/s (from
		// memory); a pulse lost in a hundred is a motor that is failing.
		"simulator.drive.pullout_sps":            {Min: 1, Max: 1e6, Unit: "steps/s"},
		"simulator.drive.max_accel_sps2":         {Min: 1, Max: 1e8, Unit: "steps/s²"},
		"simulator.drive.miss_rate":              {Min: 0, Max: 0.01},
		"simulator.drive.settle_amplitude_steps": {Min: 0, Max: 100, Unit: "steps"},

		// Couplers have 20–35 dB directivity (common practice); converters of 8 to 24 bits
		// with full scales of a few volts, converting in microseconds to a second (from memory).
		"simulator.coupler.directivity_db":   {Min: 6, Max: 80, Unit: "dB"},
		"simulator.coupler.leak_phase_deg":   {Min: -360, Max: 360, Unit: "°"},
		"simulator.coupler.adc_bits":         {Min: 8, Max: 24},
		"simulator.coupler.adc_full_scale_v": {Min: 0.1, Max: 10, Unit: "V"},
		"simulator.coupler.adc_noise_mv":     {Min: 0, Max: 100, Unit: "mV"},
		"simulator.coupler.conversion_us":    {Min: 1, Max: 1e6, Unit: "µs"},

		// The coldest and hottest places loops are put up, and the daily swings there (from memory).
		"simulator.weather.mean_c":    {Min: -50, Max: 60, Unit: "°C"},
		"simulator.weather.swing_k":   {Min: 0, Max: 30, Unit: "K"},
		"simulator.weather.peak_hour": {Min: 0, Max: 24, Unit: "h"},
		"simulator.weather.wander_k":  {Min: 0, Max: 20, Unit: "K"},

		"simulator.radio.frequency_hz": station.FrequencyRange(),
		// Ten kilowatts is above every amateur licence's limit (from memory).
		"simulator.radio.max_power_w": {Min: 0, MinOpen: true, Max: 10000, Unit: "W"},
		// Relay T/R switching and a CAT command take tens of ms; an amplifier's sequencer may
		// add some hundreds (from memory).
		"simulator.radio.key_up_ms": {Min: 0, Max: 2000, Unit: "ms"},
		"simulator.radio.unkey_ms":  {Min: 0, Max: 2000, Unit: "ms"},
	}
}

// fmtSpec prints a spec in full, following the home switch pointer, for comparisons.
func fmtSpec(s Spec) string {
	home := "none"
	if s.Drive.Home != nil {
		home = fmt.Sprintf("%+v", *s.Drive.Home)
	}
	s.Drive.Home = nil
	return fmt.Sprintf("%+v home=%s", s, home)
}
