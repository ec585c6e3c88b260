// Package coupler simulates the directional coupler, its two detectors and the ADC that reads
// them. It implements sense.ADC: each Read converts the forward and then the reflected channel
// (or both at once), each conversion taking its time on the clock, and each channel sees the
// line as it is in the middle of its own conversion, so a reading taken while the motor runs is
// smeared exactly as on real hardware.
//
// The reflected port also receives a little of the forward wave (finite directivity), which puts
// a floor under the lowest SWR that can be measured; without a carrier the detectors see only
// their own floor and the ADC's noise.
package coupler

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"time"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/sense"
)

// Line is what the coupler samples at the present instant: the forward power on the line (W,
// zero without a carrier) and the load's complex reflection coefficient.
type Line func() (forward float64, gamma complex128)

// ADCOptions describe the converter.
type ADCOptions struct {
	Bits       int           // resolution over 0..FullScale (unipolar)
	FullScale  float64       // V
	Noise      float64       // rms noise at the input, V
	Conversion time.Duration // per channel
	// Simultaneous: both channels convert at once (two converters, or a simultaneous-sampling
	// part); otherwise they are multiplexed one after the other.
	Simultaneous bool
}

// Options describe the coupler.
type Options struct {
	CouplingDB    float64 // the detector samples are this many dB below the line
	DirectivityDB float64 // forward leakage into the reflected port, dB below the forward sample
	LeakPhase     float64 // phase of that leakage relative to Γ, rad
	Forward       sense.Detector
	Reflected     sense.Detector
	ADC           ADCOptions
	Seed          uint64
}

// Validate reports every problem with o at once. Every comparison is written so that NaN and
// the infinities fail it.
func (o Options) Validate() error {
	var errs []error
	if !(o.CouplingDB >= 0 && o.CouplingDB <= 60) {
		errs = append(errs, fmt.Errorf("coupling %g dB: want 0 to 60", o.CouplingDB))
	}
	if !(o.DirectivityDB >= 6 && o.DirectivityDB <= 80) {
		errs = append(errs, fmt.Errorf("directivity %g dB: want 6 to 80", o.DirectivityDB))
	}
	if !(math.Abs(o.LeakPhase) <= 2*math.Pi) {
		errs = append(errs, fmt.Errorf("leak phase %g rad: want within ±2π", o.LeakPhase))
	}
	for _, d := range []struct {
		name string
		det  sense.Detector
	}{{"forward", o.Forward}, {"reflected", o.Reflected}} {
		if err := d.det.Validate(); err != nil {
			errs = append(errs, fmt.Errorf("%s %w", d.name, err))
		}
		errs = append(errs, finiteDetector(d.name, d.det)...)
	}
	a := o.ADC
	if a.Bits < 8 || a.Bits > 24 {
		errs = append(errs, fmt.Errorf("adc bits %d: want 8 to 24", a.Bits))
	}
	if !(a.FullScale > 0 && a.FullScale <= 10) {
		errs = append(errs, fmt.Errorf("adc full scale %g V: want more than 0 and at most 10", a.FullScale))
	}
	if !(a.Noise >= 0 && a.Noise <= 0.1) {
		errs = append(errs, fmt.Errorf("adc noise %g V: want 0 to 0.1", a.Noise))
	}
	if a.Conversion <= 0 || a.Conversion > time.Second {
		errs = append(errs, fmt.Errorf("adc conversion time %v: want more than 0 and at most 1s", a.Conversion))
	}
	return errors.Join(errs...)
}

// finiteDetector reports the detector figures that are NaN or infinite, which the detector's
// own validation does not catch everywhere (an infinite ceiling is "above the floor"). Every
// figure is checked whatever the law: a figure the law does not use must still be a number.
func finiteDetector(name string, d sense.Detector) []error {
	var errs []error
	for _, f := range []struct {
		what, unit string
		v          float64
	}{
		{"slope", "V/dB", d.Slope}, {"intercept", "dBm", d.Intercept}, {"floor", "dBm", d.Floor},
		{"ceiling", "dBm", d.Ceiling}, {"sensitivity", "V/W", d.Sensitivity}, {"maximum", "V", d.MaxVolts},
	} {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			errs = append(errs, fmt.Errorf("%s detector %s %g %s: want a finite number", name, f.what, f.v, f.unit))
		}
	}
	return errs
}

// Coupler is the simulated coupler and ADC.
type Coupler struct {
	opts   Options
	clk    clock.Clock
	line   Line
	rng    *rand.Rand
	sample float64    // linear power ratio detector/line
	leak   complex128 // ε·e^{jφ}
	lsb    float64
	top    float64 // highest code
	reads  int64
}

// New returns a coupler sampling line on clk.
func New(clk clock.Clock, line Line, opts Options) (*Coupler, error) {
	if err := opts.Validate(); err != nil {
		return nil, fmt.Errorf("coupler: %w", err)
	}
	top := math.Exp2(float64(opts.ADC.Bits)) - 1
	return &Coupler{
		opts:   opts,
		clk:    clk,
		line:   line,
		rng:    rand.New(rand.NewPCG(opts.Seed, 0x636f75706c6572)),
		sample: math.Pow(10, -opts.CouplingDB/10),
		leak:   cmplx.Rect(math.Pow(10, -opts.DirectivityDB/20), opts.LeakPhase),
		lsb:    opts.ADC.FullScale / top,
		top:    top,
	}, nil
}

// Calibration is the ideal calibration of this coupler: what a perfectly calibrated controller
// would use.
func (c *Coupler) Calibration() sense.Calibration {
	return sense.Calibration{CouplingDB: c.opts.CouplingDB, Forward: c.opts.Forward, Reflected: c.opts.Reflected}
}

// Reads counts completed reads (each one converts both channels).
func (c *Coupler) Reads() int64 { return c.reads }

// Detected returns the powers arriving at the two detectors for a line state, W.
func (c *Coupler) Detected(forward float64, gamma complex128) (fwd, ref float64) {
	g := gamma + c.leak
	return forward * c.sample, forward * c.sample * (real(g)*real(g) + imag(g)*imag(g))
}

func (c *Coupler) convert(v float64) float64 {
	if c.opts.ADC.Noise > 0 {
		v += c.rng.NormFloat64() * c.opts.ADC.Noise
	}
	code := math.Round(v / c.lsb)
	return math.Min(math.Max(code, 0), c.top) * c.lsb
}

// Read implements sense.ADC.
func (c *Coupler) Read(ctx context.Context) (sense.Voltages, error) {
	conv := c.opts.ADC.Conversion
	half := conv / 2
	if err := c.clk.Sleep(ctx, half); err != nil {
		return sense.Voltages{}, err
	}
	var out sense.Voltages
	if c.opts.ADC.Simultaneous {
		pf, g := c.line()
		fwd, ref := c.Detected(pf, g)
		out.At = c.clk.Now()
		out.Forward = c.convert(c.opts.Forward.Volts(fwd))
		out.Reflected = c.convert(c.opts.Reflected.Volts(ref))
		if err := c.clk.Sleep(ctx, conv-half); err != nil {
			return sense.Voltages{}, err
		}
	} else {
		pf, g := c.line()
		fwd, _ := c.Detected(pf, g)
		out.Forward = c.convert(c.opts.Forward.Volts(fwd))
		if err := c.clk.Sleep(ctx, conv/2+half); err != nil {
			return sense.Voltages{}, err
		}
		// the reflected channel's instant: it is the one that changes across a dip
		out.At = c.clk.Now()
		pf, g = c.line()
		_, ref := c.Detected(pf, g)
		out.Reflected = c.convert(c.opts.Reflected.Volts(ref))
		if err := c.clk.Sleep(ctx, conv-half); err != nil {
			return sense.Voltages{}, err
		}
	}
	c.reads++
	return out, nil
}
