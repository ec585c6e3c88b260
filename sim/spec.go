package sim

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"
	"time"

	"github.com/BurntSushi/toml"

	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/sim/capacitor"
	"github.com/tankd/tankd/sim/coupler"
	"github.com/tankd/tankd/sim/env"
	"github.com/tankd/tankd/sim/loop"
)

// Spec describes a simulated station: the loop, its feed, the tuning capacitor, the drive, the
// coupler and ADC, the weather and the radio. It is the one description shared by the design
// calculator, the benchmark's scenario files and the daemon's simulator, read from TOML (see
// configs/ for annotated examples). Every length is in metres, capacitance in pF, frequency in
// Hz, time in the unit its key names.
type Spec struct {
	Name        string          `toml:"name"`
	Seed        uint64          `toml:"seed"`
	Loop        LoopSpec        `toml:"loop"`
	Feed        FeedSpec        `toml:"feed"`
	Capacitor   CapacitorSpec   `toml:"capacitor"`
	Drive       DriveSpec       `toml:"drive"`
	Coupler     CouplerSpec     `toml:"coupler"`
	Environment EnvironmentSpec `toml:"environment"`
	Radio       RadioSpec       `toml:"radio"`
}

// LoopSpec is the loop's geometry, material and losses.
type LoopSpec struct {
	Turns        int     `toml:"turns"`
	DiameterM    float64 `toml:"diameter_m"`
	ConductorM   float64 `toml:"conductor_m"`
	SpacingM     float64 `toml:"spacing_m"`
	Resistivity  float64 `toml:"resistivity_ohm_m"` // 0: copper
	TempCoeff    float64 `toml:"temp_coeff_per_k"`  // 0 with resistivity 0: copper's
	Expansion    float64 `toml:"expansion_per_k"`   // 0 with resistivity 0: copper's
	ExtraLossOhm float64 `toml:"extra_loss_ohm"`
	CapacitorQ   float64 `toml:"capacitor_q"`
	GroundOhm    float64 `toml:"ground_loss_ohm"`
	Proximity    float64 `toml:"proximity"`
	StrayPF      float64 `toml:"stray_pf"`
}

// FeedSpec is the coupling-loop match.
type FeedSpec struct {
	DesignHz  float64 `toml:"design_hz"`
	OctaveSWR float64 `toml:"octave_swr"`
}

// CapacitorSpec is the tuning capacitor.
type CapacitorSpec struct {
	MinPF        float64      `toml:"min_pf"`
	MaxPF        float64      `toml:"max_pf"`
	Table        [][2]float64 `toml:"table"` // optional [fraction of travel, pF] pairs
	Travel       string       `toml:"travel"`
	SpanTurns    float64      `toml:"span_turns"`
	TempPPMPerK  float64      `toml:"temp_ppm_per_k"`
	EndMarginPct float64      `toml:"end_margin_pct"` // soft limits this far inside the travel
}

// DriveSpec is the stepper, gearing and switches as built, and the motion limits the controller
// is to use.
type DriveSpec struct {
	StepsPerRev   int     `toml:"steps_per_rev"`
	Microsteps    int     `toml:"microsteps"`
	GearRatio     int     `toml:"gear_ratio"`
	BacklashSteps float64 `toml:"backlash_steps"`
	MaxSpeed      float64 `toml:"max_speed_sps"`  // controller's planned top speed, steps/s
	Accel         float64 `toml:"accel_sps2"`     // controller's planned acceleration, steps/s²
	PulloutSpeed  float64 `toml:"pullout_sps"`    // simulated motor: speed above which it loses steps
	MaxAccel      float64 `toml:"max_accel_sps2"` // simulated motor: steepest ramp it follows
	MissRate      float64 `toml:"miss_rate"`      // probability that any pulse is lost
	SettleMS      float64 `toml:"settle_ms"`
	SettleSteps   float64 `toml:"settle_amplitude_steps"`
	SlipOnRelease bool    `toml:"slip_on_release"`
	Home          *Switch `toml:"home"` // optional home switch
}

// Switch is a switch on the capacitor shaft.
type Switch struct {
	// AtTurns is the shaft position (turns from minimum capacitance) where it actuates when
	// approached from above (it is active at and below that position).
	AtTurns         float64 `toml:"at_turns"`
	HysteresisSteps float64 `toml:"hysteresis_steps"`
}

// CouplerSpec is the directional coupler, its detectors and the ADC.
type CouplerSpec struct {
	CouplingDB    float64 `toml:"coupling_db"`
	DirectivityDB float64 `toml:"directivity_db"`
	LeakPhaseDeg  float64 `toml:"leak_phase_deg"`
	Detector      string  `toml:"detector"` // log or square
	SlopeMVPerDB  float64 `toml:"slope_mv_per_db"`
	InterceptDBm  float64 `toml:"intercept_dbm"`
	FloorDBm      float64 `toml:"floor_dbm"`
	CeilingDBm    float64 `toml:"ceiling_dbm"`
	SensitivityVW float64 `toml:"sensitivity_v_per_w"` // square law
	MaxVolts      float64 `toml:"max_volts"`           // square law
	ADCBits       int     `toml:"adc_bits"`
	ADCFullScaleV float64 `toml:"adc_full_scale_v"`
	ADCNoiseMV    float64 `toml:"adc_noise_mv"`
	ConversionUS  float64 `toml:"conversion_us"`
	Simultaneous  bool    `toml:"simultaneous"`
}

// EnvironmentSpec is the weather.
type EnvironmentSpec struct {
	MeanC    float64 `toml:"mean_c"`
	SwingK   float64 `toml:"swing_k"`
	PeakHour float64 `toml:"peak_hour"`
	WanderK  float64 `toml:"wander_k"`
}

// RadioSpec is the simulated radio.
type RadioSpec struct {
	FrequencyHz float64 `toml:"frequency_hz"`
	MaxPowerW   float64 `toml:"max_power_w"`
}

// DefaultSpec is the demo station: a two-turn loop of 2.3 m turns of 22 mm copper tube 10 cm
// apart, a 10–500 pF air variable over 180°, a 200-step motor at 16 microsteps through a 50:1
// worm (160,000 microsteps per capacitor turn), log detectors behind a 30 dB coupler read by a
// 16-bit converter. Typical amateur builds (common practice); the figures that are guesses are
// marked in configs/station-default.toml.
func DefaultSpec() Spec {
	return Spec{
		Name: "demo: two-turn 2.3 m loop, 10–500 pF air variable",
		Seed: 1,
		Loop: LoopSpec{Turns: 2, DiameterM: 2.3, ConductorM: 0.022, SpacingM: 0.10, ExtraLossOhm: 0.015, StrayPF: 10},
		Feed: FeedSpec{DesignHz: 2.6e6, OctaveSWR: 1.4},
		Capacitor: CapacitorSpec{MinPF: 10, MaxPF: 500, Travel: "free", SpanTurns: 0.5,
			TempPPMPerK: 30, EndMarginPct: 0.5},
		Drive: DriveSpec{StepsPerRev: 200, Microsteps: 16, GearRatio: 50, BacklashSteps: 40,
			MaxSpeed: 16000, Accel: 100000, PulloutSpeed: 24000, MaxAccel: 200000,
			SettleMS: 15, SettleSteps: 1.5},
		Coupler: CouplerSpec{CouplingDB: 30, DirectivityDB: 30, LeakPhaseDeg: 60, Detector: "log",
			SlopeMVPerDB: 25, InterceptDBm: -84, FloorDBm: -75, CeilingDBm: 15,
			ADCBits: 15, ADCFullScaleV: 4.096, ADCNoiseMV: 0.6, ConversionUS: 1163},
		Environment: EnvironmentSpec{MeanC: 12, SwingK: 5, PeakHour: 14, WanderK: 1},
		Radio:       RadioSpec{FrequencyHz: 3.75e6, MaxPowerW: 100},
	}
}

// LoadSpec reads a TOML description from path, on top of DefaultSpec: keys left out keep the
// demo station's values. Unknown keys are an error (a typo must not pass silently).
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

// ParseSpec reads a TOML description on top of DefaultSpec and validates it.
func ParseSpec(r io.Reader) (Spec, error) {
	s := DefaultSpec()
	md, err := toml.NewDecoder(r).Decode(&s)
	if err != nil {
		return Spec{}, err
	}
	if und := md.Undecoded(); len(und) > 0 {
		keys := make([]string, len(und))
		for i, k := range und {
			keys[i] = k.String()
		}
		return Spec{}, fmt.Errorf("unknown keys: %s", strings.Join(keys, ", "))
	}
	if err := s.Validate(); err != nil {
		return Spec{}, err
	}
	return s, nil
}

// Model is the loop's electrical model.
func (s Spec) Model() loop.Model {
	c := loop.Copper
	if s.Loop.Resistivity > 0 {
		c = loop.Conductor{Resistivity: s.Loop.Resistivity, TempCoeff: s.Loop.TempCoeff, Expansion: s.Loop.Expansion}
	}
	return loop.Model{
		Geometry: loop.Geometry{Turns: s.Loop.Turns, Diameter: s.Loop.DiameterM,
			ConductorDiameter: s.Loop.ConductorM, Spacing: s.Loop.SpacingM},
		Conductor: c,
		Losses: loop.Losses{ExtraOhm: s.Loop.ExtraLossOhm, CapacitorQ: s.Loop.CapacitorQ,
			GroundOhm: s.Loop.GroundOhm, Proximity: s.Loop.Proximity},
		Stray: s.Loop.StrayPF * 1e-12,
	}
}

// FeedModel is the feed.
func (s Spec) FeedModel() loop.Feed {
	return loop.Feed{DesignFrequency: s.Feed.DesignHz, OctaveSWR: s.Feed.OctaveSWR}
}

// CapacitorOptions are the capacitor's options.
func (s Spec) CapacitorOptions() (capacitor.Options, error) {
	tr, err := capacitor.ParseTravel(s.Capacitor.Travel)
	if err != nil {
		return capacitor.Options{}, err
	}
	o := capacitor.Options{Min: s.Capacitor.MinPF * 1e-12, Max: s.Capacitor.MaxPF * 1e-12, Travel: tr,
		Span: s.Capacitor.SpanTurns, TempCoeff: s.Capacitor.TempPPMPerK * 1e-6}
	for _, p := range s.Capacitor.Table {
		o.Table = append(o.Table, capacitor.Point{Fraction: p[0], Capacitance: p[1] * 1e-12})
	}
	return o, nil
}

// Capacitor builds the capacitor.
func (s Spec) CapacitorModel() (*capacitor.Capacitor, error) {
	o, err := s.CapacitorOptions()
	if err != nil {
		return nil, err
	}
	return capacitor.New(o)
}

// StepsPerTurn is the number of microsteps that turn the capacitor shaft once.
func (s Spec) StepsPerTurn() float64 {
	return float64(s.Drive.StepsPerRev * s.Drive.Microsteps * s.Drive.GearRatio)
}

// Calibration is the detectors' calibration as specified (the simulated coupler is built to
// exactly this; a real one is calibrated against a power meter).
func (s Spec) Calibration() (sense.Calibration, error) {
	law, err := sense.ParseLaw(s.Coupler.Detector)
	if err != nil {
		return sense.Calibration{}, err
	}
	d := sense.Detector{Law: law, Slope: s.Coupler.SlopeMVPerDB / 1000, Intercept: s.Coupler.InterceptDBm,
		Floor: s.Coupler.FloorDBm, Ceiling: s.Coupler.CeilingDBm,
		Sensitivity: s.Coupler.SensitivityVW, MaxVolts: s.Coupler.MaxVolts}
	return sense.Calibration{CouplingDB: s.Coupler.CouplingDB, Forward: d, Reflected: d}, nil
}

// CouplerOptions are the simulated coupler's and ADC's options.
func (s Spec) CouplerOptions() (coupler.Options, error) {
	cal, err := s.Calibration()
	if err != nil {
		return coupler.Options{}, err
	}
	c := s.Coupler
	return coupler.Options{
		CouplingDB: c.CouplingDB, DirectivityDB: c.DirectivityDB, LeakPhase: c.LeakPhaseDeg * math.Pi / 180,
		Forward: cal.Forward, Reflected: cal.Reflected, Seed: s.Seed ^ 0x636f7570,
		ADC: coupler.ADCOptions{Bits: c.ADCBits, FullScale: c.ADCFullScaleV, Noise: c.ADCNoiseMV / 1000,
			Conversion: s.Conversion(), Simultaneous: c.Simultaneous},
	}, nil
}

// EnvOptions are the simulated weather's options.
func (s Spec) EnvOptions() env.Options {
	e := s.Environment
	return env.Options{Mean: e.MeanC, Swing: e.SwingK, PeakHour: e.PeakHour, Wander: e.WanderK, Seed: s.Seed ^ 0x776561}
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
	return time.Duration(s.Coupler.ConversionUS * float64(time.Microsecond))
}

// Validate reports every problem at once, each with its key.
func (s Spec) Validate() error {
	var errs []error
	add := func(key string, err error) {
		if err != nil {
			errs = append(errs, fmt.Errorf("[%s] %w", key, err))
		}
	}
	add("loop", s.Model().Validate())
	add("feed", s.FeedModel().Validate())
	if _, err := s.CapacitorModel(); err != nil {
		add("capacitor", err)
	}
	if s.Capacitor.EndMarginPct < 0 || s.Capacitor.EndMarginPct > 20 {
		add("capacitor", fmt.Errorf("end_margin_pct %g: want 0 to 20", s.Capacitor.EndMarginPct))
	}
	d := s.Drive
	if d.StepsPerRev < 4 || d.StepsPerRev > 10000 {
		add("drive", fmt.Errorf("steps_per_rev %d: want 4 to 10000", d.StepsPerRev))
	}
	if d.Microsteps < 1 || d.Microsteps > 256 {
		add("drive", fmt.Errorf("microsteps %d: want 1 to 256", d.Microsteps))
	}
	if d.GearRatio < 1 || d.GearRatio > 1000 {
		add("drive", fmt.Errorf("gear_ratio %d: want 1 to 1000", d.GearRatio))
	}
	if d.BacklashSteps < 0 || d.BacklashSteps > 5000 {
		add("drive", fmt.Errorf("backlash_steps %g: want 0 to 5000", d.BacklashSteps))
	}
	if !(d.MaxSpeed > 0) || !(d.Accel > 0) || !(d.PulloutSpeed > 0) || !(d.MaxAccel > 0) {
		add("drive", fmt.Errorf("max_speed_sps %g, accel_sps2 %g, pullout_sps %g, max_accel_sps2 %g: want all more than 0", d.MaxSpeed, d.Accel, d.PulloutSpeed, d.MaxAccel))
	}
	if d.MissRate < 0 || d.MissRate > 0.01 {
		add("drive", fmt.Errorf("miss_rate %g: want 0 to 0.01", d.MissRate))
	}
	if d.SettleMS < 0 || d.SettleMS > 2000 || d.SettleSteps < 0 || d.SettleSteps > 100 {
		add("drive", fmt.Errorf("settle_ms %g (0..2000), settle_amplitude_steps %g (0..100) out of range", d.SettleMS, d.SettleSteps))
	}
	if d.Home != nil && (d.Home.AtTurns < -1 || d.Home.AtTurns > s.Capacitor.SpanTurns || d.Home.HysteresisSteps < 0) {
		add("drive.home", fmt.Errorf("at_turns %g: want within -1 and the capacitor span %g; hysteresis_steps %g: want 0 or more", d.Home.AtTurns, s.Capacitor.SpanTurns, d.Home.HysteresisSteps))
	}
	if co, err := s.CouplerOptions(); err != nil {
		add("coupler", err)
	} else {
		add("coupler", co.Validate())
	}
	add("environment", s.EnvOptions().Validate())
	if !(s.Radio.FrequencyHz > 0) || !(s.Radio.MaxPowerW > 0) {
		add("radio", fmt.Errorf("frequency_hz %g, max_power_w %g: want both more than 0", s.Radio.FrequencyHz, s.Radio.MaxPowerW))
	}
	return errors.Join(errs...)
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
