package sense

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"
)

// Law is a detector's transfer law.
type Law int

const (
	// LogLinear: a log amplifier, output volts linear in input dBm over its dynamic range.
	LogLinear Law = iota
	// SquareLaw: a diode detector at low level, output volts proportional to input power.
	SquareLaw
)

// String returns "log" or "square".
func (l Law) String() string {
	if l == SquareLaw {
		return "square"
	}
	return "log"
}

// ParseLaw parses "log" or "square".
func ParseLaw(s string) (Law, error) {
	switch s {
	case "log", "":
		return LogLinear, nil
	case "square":
		return SquareLaw, nil
	}
	return LogLinear, fmt.Errorf("detector law %q: want log or square", s)
}

// Detector is the transfer law of one detector: input power at the detector to output volts.
type Detector struct {
	Law Law
	// Log law: V = Slope·(P_dBm − Intercept), for inputs between Floor and Ceiling (dBm).
	Slope     float64 // V per dB
	Intercept float64 // dBm
	Floor     float64 // dBm: below this the output stays at its floor
	Ceiling   float64 // dBm: above this the output saturates
	// Square law: V = Sensitivity·P, saturating at MaxVolts.
	Sensitivity float64 // V per W
	MaxVolts    float64
}

// Validate reports every problem with d at once.
func (d Detector) Validate() error {
	var errs []error
	switch d.Law {
	case LogLinear:
		if !(d.Slope > 0) || d.Slope > 1 {
			errs = append(errs, fmt.Errorf("detector slope %g V/dB: want more than 0 and at most 1", d.Slope))
		}
		if !finite(d.Intercept) || !finite(d.Floor) || !finite(d.Ceiling) {
			errs = append(errs, fmt.Errorf("detector intercept %g, floor %g, ceiling %g dBm: want finite values", d.Intercept, d.Floor, d.Ceiling))
		} else if !(d.Ceiling > d.Floor) {
			errs = append(errs, fmt.Errorf("detector range %g to %g dBm: want floor below ceiling", d.Floor, d.Ceiling))
		}
		if d.Floor < d.Intercept {
			errs = append(errs, fmt.Errorf("detector floor %g dBm: want at or above the intercept %g dBm", d.Floor, d.Intercept))
		}
	case SquareLaw:
		if !(d.Sensitivity > 0) || math.IsInf(d.Sensitivity, 0) {
			errs = append(errs, fmt.Errorf("detector sensitivity %g V/W: want more than 0", d.Sensitivity))
		}
		if !(d.MaxVolts > 0) || math.IsInf(d.MaxVolts, 0) {
			errs = append(errs, fmt.Errorf("detector maximum %g V: want more than 0", d.MaxVolts))
		}
	default:
		errs = append(errs, fmt.Errorf("detector law %d: unknown", d.Law))
	}
	return errors.Join(errs...)
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func dBm(w float64) float64 { return 10*math.Log10(w) + 30 }

// Volts is the detector output for input power w (W).
func (d Detector) Volts(w float64) float64 {
	if d.Law == SquareLaw {
		return math.Min(d.Sensitivity*math.Max(w, 0), d.MaxVolts)
	}
	p := d.Floor
	if w > 0 {
		p = math.Min(math.Max(dBm(w), d.Floor), d.Ceiling)
	}
	return d.Slope * (p - d.Intercept)
}

// Power is the input power (W) that gives output v: the calibration inverse of Volts. Outputs
// at or below the floor read as the floor's power (log) or zero (square law).
func (d Detector) Power(v float64) float64 {
	if d.Law == SquareLaw {
		return math.Max(v, 0) / d.Sensitivity
	}
	p := math.Min(math.Max(v/d.Slope+d.Intercept, d.Floor), d.Ceiling)
	return math.Pow(10, (p-30)/10)
}

// Calibration turns detector voltages into line powers: the coupler samples the line CouplingDB
// below the line power into each detector.
type Calibration struct {
	CouplingDB float64 // positive: the sample is this many dB below the line
	Forward    Detector
	Reflected  Detector
}

// Validate reports every problem with c at once.
func (c Calibration) Validate() error {
	var errs []error
	if c.CouplingDB < 0 || c.CouplingDB > 60 {
		errs = append(errs, fmt.Errorf("coupling %g dB: want 0 to 60", c.CouplingDB))
	}
	if err := c.Forward.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("forward %w", err))
	}
	if err := c.Reflected.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("reflected %w", err))
	}
	return errors.Join(errs...)
}

// LinePower converts one detector's output to the line power it stands for, W.
func (c Calibration) LinePower(d Detector, v float64) float64 {
	return d.Power(v) * math.Pow(10, c.CouplingDB/10)
}

// Voltages is one conversion of both detector outputs.
type Voltages struct {
	At        time.Time // middle of the conversion
	Forward   float64   // V
	Reflected float64   // V
}

// ADC samples the two detector outputs. drivers/ implements it on I2C/SPI converters and sim/ on
// the simulated coupler. Read blocks for the conversion time.
type ADC interface {
	Read(ctx context.Context) (Voltages, error)
}

// Coupler is a Sensor made of an ADC and the detectors' calibration.
type Coupler struct {
	adc ADC
	cal Calibration
}

// NewCoupler validates cal and returns the sensor.
func NewCoupler(adc ADC, cal Calibration) (*Coupler, error) {
	if err := cal.Validate(); err != nil {
		return nil, fmt.Errorf("coupler calibration: %w", err)
	}
	return &Coupler{adc: adc, cal: cal}, nil
}

// Read implements Sensor.
func (c *Coupler) Read(ctx context.Context) (Reading, error) {
	v, err := c.adc.Read(ctx)
	if err != nil {
		return Reading{}, fmt.Errorf("coupler: %w", err)
	}
	return Reading{
		At:        v.At,
		Forward:   watts(c.cal.LinePower(c.cal.Forward, v.Forward)),
		Reflected: watts(c.cal.LinePower(c.cal.Reflected, v.Reflected)),
	}, nil
}

// watts converts W to physic.Power (nW resolution), saturating instead of overflowing.
func watts(w float64) physic.Power {
	if !(w > 0) {
		return 0
	}
	return physic.Power(math.Min(w*float64(physic.Watt), math.MaxInt64/2))
}

// Watts converts a physic.Power to W.
func Watts(p physic.Power) float64 { return float64(p) / float64(physic.Watt) }
