package station

import (
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"github.com/BurntSushi/toml"

	"github.com/tankd/tankd/controller/physics/capacitor"
	"github.com/tankd/tankd/controller/physics/loop"
	"github.com/tankd/tankd/controller/sense"
)

// Description is a station as its builder describes it. Every length is in metres,
// capacitance in pF, frequency in Hz, time in the unit its key names.
type Description struct {
	Name      string    `toml:"name"`
	Loop      Loop      `toml:"loop"`
	Feed      Feed      `toml:"feed"`
	Capacitor Capacitor `toml:"capacitor"`
	Drive     Drive     `toml:"drive"`
	Coupler   Coupler   `toml:"coupler"`
	Tolerance Tolerance `toml:"tolerance"`
	Site      Site      `toml:"site"`
}

// Loop is the loop's geometry, material and losses.
type Loop struct {
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
	// StrayPF is the capacitance across the capacitor besides the winding's own (which the
	// model computes from the geometry): leads, the capacitor's frame and fittings.
	StrayPF float64 `toml:"stray_pf"`
}

// Feed is the coupling-loop match.
type Feed struct {
	DesignHz  float64 `toml:"design_hz"`
	OctaveSWR float64 `toml:"octave_swr"`
}

// Capacitor is the tuning capacitor.
type Capacitor struct {
	MinPF        float64      `toml:"min_pf"`
	MaxPF        float64      `toml:"max_pf"`
	Table        [][2]float64 `toml:"table" range:"apart"` // optional [fraction of travel, pF] pairs
	Travel       string       `toml:"travel"`
	SpanTurns    float64      `toml:"span_turns"`
	TempPPMPerK  float64      `toml:"temp_ppm_per_k"`
	EndMarginPct float64      `toml:"end_margin_pct"` // soft limits this far inside the travel
}

// Drive is the stepper and its gearing as built, and the motion the controller is to plan with.
type Drive struct {
	StepsPerRev int `toml:"steps_per_rev"`
	Microsteps  int `toml:"microsteps"`
	GearRatio   int `toml:"gear_ratio"`
	// BacklashSteps is the gear play at the motor as the builder knows it; the controller
	// assumes more (NominalBacklash) until a calibration has measured it.
	BacklashSteps float64 `toml:"backlash_steps"`
	MaxSpeed      float64 `toml:"max_speed_sps"` // planned top speed, steps/s
	Accel         float64 `toml:"accel_sps2"`    // planned acceleration, steps/s²
	SettleMS      float64 `toml:"settle_ms"`     // mechanical ringing after a move
	// SlipOnRelease: the shaft can turn while the motor is released (a spring, gravity).
	SlipOnRelease bool    `toml:"slip_on_release"`
	Home          *Switch `toml:"home"` // optional home switch
}

// Settle is the wait after every move for the mechanics to come to rest.
func (d Drive) Settle() time.Duration {
	return time.Duration(d.SettleMS * float64(time.Millisecond))
}

// Switch is a switch on the capacitor shaft.
type Switch struct {
	// AtTurns is the shaft position (turns from minimum capacitance) where it actuates when
	// approached from above (it is active at and below that position).
	AtTurns         float64 `toml:"at_turns"`
	HysteresisSteps float64 `toml:"hysteresis_steps"`
}

// Coupler is the directional coupler's calibration: how far below the line its samples are,
// and the detectors' law (both detectors alike).
type Coupler struct {
	CouplingDB    float64 `toml:"coupling_db"`
	Detector      string  `toml:"detector"` // log or square
	SlopeMVPerDB  float64 `toml:"slope_mv_per_db"`
	InterceptDBm  float64 `toml:"intercept_dbm"`
	FloorDBm      float64 `toml:"floor_dbm"`
	CeilingDBm    float64 `toml:"ceiling_dbm"`
	SensitivityVW float64 `toml:"sensitivity_v_per_w"` // square law
	MaxVolts      float64 `toml:"max_volts"`           // square law
}

// Tolerance is how far the real station may be from its description, 1 σ: the physics prior's
// uncertainty. Real loops differ from their drawings (stray capacitance, the exact inductance,
// the capacitor's true law); a prior that claimed more certainty would send the controller to
// the wrong place with confidence.
type Tolerance struct {
	// Capacitance is the fractional error of the capacitance the loop needs (inductance, the
	// capacitor's law), e.g. 0.03.
	Capacitance float64 `toml:"capacitance"`
	// StrayPF is the error of the stray capacitance, pF.
	StrayPF float64 `toml:"stray_pf"`
}

// Site is where the loop stands.
type Site struct {
	// MeanC is the mean air temperature at the loop: the physics prior predicts for a loop at
	// this temperature (the memory map learns the drift either side of it).
	MeanC float64 `toml:"mean_c"`
}

// The builder's first guess at how far a loop is from its drawing (common practice: a few
// percent on the inductance, a few pF on the strays).
const (
	// defaultLeadsPF is the demo station's capacitance across the capacitor besides the
	// winding's own: the straps from the loop's ends to the capacitor and its frame (guess: a
	// few pF). The winding itself adds about 26 pF (loop.Geometry.SelfCapacitance), 29 pF in
	// all.
	defaultLeadsPF              = 3
	defaultCapacitanceTolerance = 0.03
	defaultStrayTolerancePF     = 3
)

// DefaultDescription is the demo station: a two-turn loop of 2.3 m turns of 22 mm copper tube
// 10 cm apart, a 10–500 pF air variable over 180°, a 200-step motor at 16 microsteps through a
// 50:1 worm (160,000 microsteps per capacitor turn), log detectors behind a 30 dB coupler.
// Typical amateur builds (common practice); the figures that are guesses are marked in
// configs/stations/default.toml.
func DefaultDescription() Description {
	return Description{
		Name: "demo: two-turn 2.3 m loop, 10–500 pF air variable",
		Loop: Loop{Turns: 2, DiameterM: 2.3, ConductorM: 0.022, SpacingM: 0.10, ExtraLossOhm: 0.015, StrayPF: defaultLeadsPF},
		Feed: Feed{DesignHz: 2.6e6, OctaveSWR: 1.4},
		Capacitor: Capacitor{MinPF: 10, MaxPF: 500, Travel: capacitor.Free.String(), SpanTurns: 0.5,
			TempPPMPerK: 30, EndMarginPct: 0.5},
		Drive: Drive{StepsPerRev: 200, Microsteps: 16, GearRatio: 50, BacklashSteps: 40,
			MaxSpeed: 16000, Accel: 100000, SettleMS: 15},
		Coupler: Coupler{CouplingDB: 30, Detector: sense.LogLinear.String(),
			SlopeMVPerDB: 25, InterceptDBm: -84, FloorDBm: -75, CeilingDBm: 15},
		Tolerance: Tolerance{Capacitance: defaultCapacitanceTolerance, StrayPF: defaultStrayTolerancePF},
		// a temperate site's yearly mean (from memory)
		Site: Site{MeanC: 12},
	}
}

// ErrUnknownKey is wrapped by the error for keys a description does not have: a typo must not
// pass silently.
var ErrUnknownKey = errors.New("unknown key")

// Decode reads TOML into dst on top of what dst holds (the defaults), strictly: a key dst has
// no field for is an error wrapping ErrUnknownKey. dst is a *Description, or a pointer to a
// struct that embeds one and adds sections of its own. It does not validate.
func Decode(r io.Reader, dst any) error {
	md, err := toml.NewDecoder(r).Decode(dst)
	if err != nil {
		return err
	}
	if und := md.Undecoded(); len(und) > 0 {
		keys := make([]string, len(und))
		for i, k := range und {
			keys[i] = k.String()
		}
		return fmt.Errorf("%w: %s", ErrUnknownKey, strings.Join(keys, ", "))
	}
	return nil
}

// Parse reads a TOML description on top of DefaultDescription (keys left out keep the demo
// station's values) and validates it.
func Parse(r io.Reader) (Description, error) {
	d := DefaultDescription()
	if err := Decode(r, &d); err != nil {
		return Description{}, fmt.Errorf("station description: %w", err)
	}
	if err := d.Validate(); err != nil {
		return Description{}, fmt.Errorf("station description: %w", err)
	}
	return d, nil
}

// Load is Parse from the file at path.
func Load(path string) (Description, error) {
	f, err := os.Open(path)
	if err != nil {
		return Description{}, fmt.Errorf("station description: %w", err)
	}
	defer f.Close()
	d, err := Parse(f)
	if err != nil {
		return Description{}, fmt.Errorf("%s: %w", path, err)
	}
	return d, nil
}

// Model is the loop's electrical model: the winding's own capacitance from its geometry
// (loop.Geometry.SelfCapacitance), and stray_pf besides it for the leads and fittings.
func (d Description) Model() loop.Model {
	c := loop.Copper
	if d.Loop.Resistivity > 0 {
		c = loop.Conductor{Resistivity: d.Loop.Resistivity, TempCoeff: d.Loop.TempCoeff, Expansion: d.Loop.Expansion}
	}
	g := loop.Geometry{Turns: d.Loop.Turns, Diameter: d.Loop.DiameterM,
		ConductorDiameter: d.Loop.ConductorM, Spacing: d.Loop.SpacingM}
	return loop.Model{
		Geometry:  g,
		Conductor: c,
		Losses: loop.Losses{ExtraOhm: d.Loop.ExtraLossOhm, CapacitorQ: d.Loop.CapacitorQ,
			GroundOhm: d.Loop.GroundOhm, Proximity: d.Loop.Proximity},
		Stray:           d.Loop.StrayPF * 1e-12,
		SelfCapacitance: g.SelfCapacitance(),
	}
}

// FeedModel is the feed.
func (d Description) FeedModel() loop.Feed {
	return loop.Feed{DesignFrequency: d.Feed.DesignHz, OctaveSWR: d.Feed.OctaveSWR}
}

// CapacitorOptions are the capacitor's options.
func (d Description) CapacitorOptions() (capacitor.Options, error) {
	tr, err := capacitor.ParseTravel(d.Capacitor.Travel)
	if err != nil {
		return capacitor.Options{}, err
	}
	o := capacitor.Options{Min: d.Capacitor.MinPF * 1e-12, Max: d.Capacitor.MaxPF * 1e-12, Travel: tr,
		Span: d.Capacitor.SpanTurns, TempCoeff: d.Capacitor.TempPPMPerK * 1e-6}
	for _, p := range d.Capacitor.Table {
		o.Table = append(o.Table, capacitor.Point{Fraction: p[0], Capacitance: p[1] * 1e-12})
	}
	return o, nil
}

// CapacitorModel builds the capacitor.
func (d Description) CapacitorModel() (*capacitor.Capacitor, error) {
	o, err := d.CapacitorOptions()
	if err != nil {
		return nil, err
	}
	return capacitor.New(o)
}

// HardStops reports whether the capacitor's shaft turns between hard end stops.
func (d Description) HardStops() bool {
	return d.Capacitor.Travel == capacitor.Stops.String()
}

// StepsPerTurn is the number of microsteps that turn the capacitor shaft once.
func (d Description) StepsPerTurn() float64 {
	return float64(d.Drive.StepsPerRev * d.Drive.Microsteps * d.Drive.GearRatio)
}

// Calibration is the detectors' calibration as described (a real coupler is calibrated against
// a power meter; the simulated one is built to exactly this).
func (d Description) Calibration() (sense.Calibration, error) {
	det, err := d.detector()
	if err != nil {
		return sense.Calibration{}, err
	}
	return sense.Calibration{CouplingDB: d.Coupler.CouplingDB, Forward: det, Reflected: det}, nil
}

// detector is the law both detectors follow.
func (d Description) detector() (sense.Detector, error) {
	law, err := sense.ParseLaw(d.Coupler.Detector)
	if err != nil {
		return sense.Detector{}, err
	}
	c := d.Coupler
	return sense.Detector{Law: law, Slope: c.SlopeMVPerDB / 1000, Intercept: c.InterceptDBm,
		Floor: c.FloorDBm, Ceiling: c.CeilingDBm, Sensitivity: c.SensitivityVW, MaxVolts: c.MaxVolts}, nil
}
