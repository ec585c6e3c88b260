package sim

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"reflect"
	"strconv"
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

// Validate reports every problem at once, each with its key and the accepted range. Every
// numeric key is first checked against its range (KeyRange); then the cross-key rules and the
// parts' own validation run for each section whose keys are all in range (for a section with a
// bad key they would only report it again in other words).
func (s Spec) Validate() error {
	var errs []error
	add := func(section string, err error) {
		switch {
		case err == nil:
		case section == "":
			errs = append(errs, err)
		default:
			errs = append(errs, fmt.Errorf("[%s] %w", section, err))
		}
	}
	bad := map[string]bool{}
	ranges := keyRanges()
	walkKeys(reflect.ValueOf(s), "", func(key string, v float64, hasRange bool) {
		section, name := splitKey(key)
		r, ok := ranges[key]
		if !ok || !hasRange {
			bad[topSection(key)] = true
			add(section, fmt.Errorf("%s: no accepted range is known for this key", name))
			return
		}
		if err := r.Check(v); err != nil {
			bad[topSection(key)] = true
			add(section, fmt.Errorf("%s %w", name, err))
		}
	})
	for i, p := range s.Capacitor.Table {
		for j, col := range [2]string{"fraction", "pf"} {
			if err := tableRange(j).Check(p[j]); err != nil {
				bad["capacitor"] = true
				add("capacitor", fmt.Errorf("table point %d: %s %w", i+1, col, err))
			}
		}
	}
	if !bad["loop"] {
		add("loop", s.Model().Validate())
	}
	if !bad["feed"] {
		add("feed", s.FeedModel().Validate())
	}
	if !bad["capacitor"] {
		if len(s.Capacitor.Table) == 0 && !(s.Capacitor.MinPF < s.Capacitor.MaxPF) {
			add("capacitor", fmt.Errorf("min_pf %g, max_pf %g: want min_pf below max_pf", s.Capacitor.MinPF, s.Capacitor.MaxPF))
		} else if _, err := s.CapacitorModel(); err != nil {
			add("capacitor", err)
		}
	}
	if h := s.Drive.Home; h != nil && !bad["drive"] && !bad["capacitor"] && h.AtTurns > s.Capacitor.SpanTurns {
		add("drive.home", fmt.Errorf("at_turns %g: want at most the capacitor's span_turns %g", h.AtTurns, s.Capacitor.SpanTurns))
	}
	if !bad["coupler"] {
		if co, err := s.CouplerOptions(); err != nil {
			add("coupler", err)
		} else {
			add("coupler", co.Validate())
		}
	}
	if !bad["environment"] {
		add("environment", s.EnvOptions().Validate())
	}
	return errors.Join(errs...)
}

// Range is the accepted range of a numeric value: Min to Max inclusive, or more than Min and at
// most Max when MinOpen; both are finite. When Zero is set, 0 is accepted too and selects what
// Zero names (copper, an estimate, a lossless part). NaN and the infinities are never in a range.
type Range struct {
	Min, Max float64
	MinOpen  bool
	Zero     string
	Unit     string
	Hint     string // an easier reading of the range, e.g. "100 kHz to 60 MHz"
}

// Contains reports whether v is in r.
func (r Range) Contains(v float64) bool {
	if r.Zero != "" && v == 0 {
		return true
	}
	if r.MinOpen {
		return v > r.Min && v <= r.Max
	}
	return v >= r.Min && v <= r.Max // false for NaN; ±Inf lie outside every finite range
}

// String says the range as the errors put it, e.g. "0.1 to 20 m" or "0 (copper) or 1e-09 to
// 1e-05 Ω·m".
func (r Range) String() string {
	var b strings.Builder
	if r.Zero != "" {
		fmt.Fprintf(&b, "0 (%s) or ", r.Zero)
	}
	if r.MinOpen {
		fmt.Fprintf(&b, "more than %s and at most %s", formatNumber(r.Min), formatNumber(r.Max))
	} else {
		fmt.Fprintf(&b, "%s to %s", formatNumber(r.Min), formatNumber(r.Max))
	}
	if r.Unit != "" {
		b.WriteString(" " + r.Unit)
	}
	if r.Hint != "" {
		b.WriteString(" (" + r.Hint + ")")
	}
	return b.String()
}

// Check returns nil for a value in r, otherwise an error such as "NaN: want 0.1 to 20 m".
func (r Range) Check(v float64) error {
	if r.Contains(v) {
		return nil
	}
	return fmt.Errorf("%s: want %s", formatNumber(v), r)
}

// formatNumber writes v plainly where that stays short (0.022, 60000000) and in exponent form
// otherwise (1e-05, 1e+09).
func formatNumber(v float64) string {
	if a := math.Abs(v); v == 0 || a >= 1e-4 && a < 1e9 {
		return strconv.FormatFloat(v, 'f', -1, 64)
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

// FrequencyRange is the accepted range of every frequency a station description or a tool
// takes: from the 2200 m band (136 kHz) to the 6 m band (54 MHz), with a little room (from
// memory). Above it a loop of any usable size is no longer small against the wavelength, and
// the small-loop model means nothing.
func FrequencyRange() Range {
	return Range{Min: 100e3, Max: 60e6, Unit: "Hz", Hint: "100 kHz to 60 MHz"}
}

// KeyRange returns the accepted range of the numeric key (e.g. "loop.diameter_m",
// "drive.home.at_turns") of a station description; ok is false for a key that has none.
// The ranges are generous: they reject what no real build has, not what is merely unusual.
// Cross-key rules (min below max, a conductor thinner than a tenth of the turn diameter, ...)
// are the parts' own and are checked by Validate.
func KeyRange(key string) (r Range, ok bool) {
	r, ok = keyRanges()[key]
	return r, ok
}

func keyRanges() map[string]Range {
	return map[string]Range{
		"seed": {Min: 0, Max: math.MaxUint64},

		// One to four turns is usual, a few small loops have more; transmitting loops are built
		// from about 0.3 m to 5 m across of 6 mm to 100 mm tube (common practice). The bounds
		// are wider still; whether the loop is small against the wavelength is a question of
		// frequency, which the design calculator answers per frequency.
		"loop.turns":       {Min: 1, Max: 8},
		"loop.diameter_m":  {Min: 0.1, Max: 20, Unit: "m"},
		"loop.conductor_m": {Min: 0.0005, Max: 0.2, Unit: "m"},
		"loop.spacing_m":   {Min: 0, Max: 2, Unit: "m"},
		// Silver 1.6e-8 to stainless steel 7e-7 Ω·m (CRC Handbook of Chemistry and Physics,
		// from memory), with room either side.
		"loop.resistivity_ohm_m": {Min: 1e-9, Max: 1e-5, Zero: "copper", Unit: "Ω·m"},
		"loop.temp_coeff_per_k":  {Min: 0, Max: 0.02, Unit: "/K"},
		"loop.expansion_per_k":   {Min: 0, Max: 1e-4, Unit: "/K"},
		// A loop's own loss is tens of milliohms; a hundred ohms is a dummy load (common practice).
		"loop.extra_loss_ohm":  {Min: 0, Max: 100, Unit: "Ω"},
		"loop.ground_loss_ohm": {Min: 0, Max: 100, Unit: "Ω"},
		// A poor capacitor has a Q of some hundreds, a good vacuum one tens of thousands (from memory).
		"loop.capacitor_q": {Min: 10, Max: 1e7, Zero: "lossless"},
		"loop.proximity":   {Min: 1, Max: 10, Zero: "estimate"},
		"loop.stray_pf":    {Min: 0, Max: 1000, Unit: "pF"},

		"feed.design_hz":  FrequencyRange(),
		"feed.octave_swr": {Min: 1, Max: 10},

		// Air and vacuum variables run from a few pF to a few thousand (common practice).
		"capacitor.min_pf":         {Min: 0.1, Max: 10000, Unit: "pF"},
		"capacitor.max_pf":         {Min: 0.1, Max: 10000, Unit: "pF"},
		"capacitor.span_turns":     {Min: 0.01, Max: 100, Unit: "turns"},
		"capacitor.temp_ppm_per_k": {Min: -1000, Max: 1000, Unit: "ppm/K"},
		"capacitor.end_margin_pct": {Min: 0, Max: 20, Unit: "%"},

		// Steppers of 4 to a few thousand steps a revolution, drivers to 256 microsteps (common
		// practice); speeds and ramps up to what a microstepping driver can pulse, about 1e6
		// steps/s (from memory).
		"drive.steps_per_rev":          {Min: 4, Max: 10000},
		"drive.microsteps":             {Min: 1, Max: 256},
		"drive.gear_ratio":             {Min: 1, Max: 1000},
		"drive.backlash_steps":         {Min: 0, Max: 5000, Unit: "steps"},
		"drive.max_speed_sps":          {Min: 1, Max: 1e6, Unit: "steps/s"},
		"drive.accel_sps2":             {Min: 1, Max: 1e8, Unit: "steps/s²"},
		"drive.pullout_sps":            {Min: 1, Max: 1e6, Unit: "steps/s"},
		"drive.max_accel_sps2":         {Min: 1, Max: 1e8, Unit: "steps/s²"},
		"drive.miss_rate":              {Min: 0, Max: 0.01},
		"drive.settle_ms":              {Min: 0, Max: 2000, Unit: "ms"},
		"drive.settle_amplitude_steps": {Min: 0, Max: 100, Unit: "steps"},
		"drive.home.at_turns":          {Min: -1, Max: 100, Unit: "turns"},
		"drive.home.hysteresis_steps":  {Min: 0, Max: 5000, Unit: "steps"},

		// Couplers sample 20–40 dB down with 20–35 dB directivity (common practice); log
		// detectors run from about −90 to +20 dBm at some tens of mV/dB (from memory).
		"coupler.coupling_db":         {Min: 0, Max: 60, Unit: "dB"},
		"coupler.directivity_db":      {Min: 6, Max: 80, Unit: "dB"},
		"coupler.leak_phase_deg":      {Min: -360, Max: 360, Unit: "°"},
		"coupler.slope_mv_per_db":     {Min: 0.1, Max: 1000, Unit: "mV/dB"},
		"coupler.intercept_dbm":       {Min: -150, Max: 50, Unit: "dBm"},
		"coupler.floor_dbm":           {Min: -150, Max: 50, Unit: "dBm"},
		"coupler.ceiling_dbm":         {Min: -150, Max: 50, Unit: "dBm"},
		"coupler.sensitivity_v_per_w": {Min: 0, Max: 1e6, Unit: "V/W"},
		"coupler.max_volts":           {Min: 0, Max: 100, Unit: "V"},
		"coupler.adc_bits":            {Min: 8, Max: 24},
		"coupler.adc_full_scale_v":    {Min: 0.1, Max: 10, Unit: "V"},
		"coupler.adc_noise_mv":        {Min: 0, Max: 100, Unit: "mV"},
		"coupler.conversion_us":       {Min: 1, Max: 1e6, Unit: "µs"},

		// The coldest and hottest places loops are put up, and the daily swings there (from memory).
		"environment.mean_c":    {Min: -50, Max: 60, Unit: "°C"},
		"environment.swing_k":   {Min: 0, Max: 30, Unit: "K"},
		"environment.peak_hour": {Min: 0, Max: 24, Unit: "h"},
		"environment.wander_k":  {Min: 0, Max: 20, Unit: "K"},

		"radio.frequency_hz": FrequencyRange(),
		// Ten kilowatts is above every amateur licence's limit (from memory).
		"radio.max_power_w": {Min: 0, MinOpen: true, Max: 10000, Unit: "W"},
	}
}

// tableRange is the range of column i of the capacitor table: [fraction of travel, pF].
func tableRange(i int) Range {
	if i == 0 {
		return Range{Min: 0, Max: 1}
	}
	return keyRanges()["capacitor.max_pf"]
}

// walkKeys calls visit for every numeric key of the description held in v (a struct), with the
// key's TOML path. A numeric kind it cannot read as a number (a new slice, a map) is visited
// with hasRange false, so that it cannot pass unchecked; the capacitor table is checked apart.
func walkKeys(v reflect.Value, prefix string, visit func(key string, x float64, hasRange bool)) {
	t := v.Type()
	for i := range t.NumField() {
		tag := strings.Split(t.Field(i).Tag.Get("toml"), ",")[0]
		if tag == "" || tag == "-" {
			continue
		}
		key := tag
		if prefix != "" {
			key = prefix + "." + tag
		}
		f := v.Field(i)
		switch f.Kind() {
		case reflect.Struct:
			walkKeys(f, key, visit)
		case reflect.Pointer:
			if !f.IsNil() && f.Elem().Kind() == reflect.Struct {
				walkKeys(f.Elem(), key, visit)
			}
		case reflect.Float32, reflect.Float64:
			visit(key, f.Float(), true)
		case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64:
			visit(key, float64(f.Int()), true)
		case reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
			visit(key, float64(f.Uint()), true)
		case reflect.String, reflect.Bool:
		default:
			if key != "capacitor.table" {
				visit(key, 0, false)
			}
		}
	}
}

// splitKey splits "drive.home.at_turns" into the section "drive.home" and the name "at_turns".
func splitKey(key string) (section, name string) {
	if i := strings.LastIndex(key, "."); i >= 0 {
		return key[:i], key[i+1:]
	}
	return "", key
}

// topSection is the first part of a key: "drive" for "drive.home.at_turns".
func topSection(key string) string {
	section, _, _ := strings.Cut(key, ".")
	return section
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
