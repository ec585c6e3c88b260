package coupler

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/sim/vclock"
)

func opts() Options {
	// A log-amplifier pair of about 25 mV/dB (from memory), a 30 dB coupler and a 16-bit
	// converter at 860 samples/s (about 1.16 ms a conversion; from memory of common I2C parts).
	det := sense.Detector{Law: sense.LogLinear, Slope: 0.025, Intercept: -84, Floor: -75, Ceiling: 15}
	return Options{
		CouplingDB: 30, DirectivityDB: 30, Forward: det, Reflected: det,
		ADC: ADCOptions{Bits: 16, FullScale: 4.096, Noise: 0, Conversion: 1163 * time.Microsecond},
	}
}

func TestReadingMatchesLine(t *testing.T) {
	clk := vclock.New(vclock.Epoch)
	// SWR 1.5 ↔ |Γ| = 0.2; with leakage in phase it reads |0.2 + 0.0316|.
	o := opts()
	o.DirectivityDB = 80 // negligible leakage for this check
	c, err := New(clk, func() (float64, complex128) { return 5, 0.2 }, o)
	if err != nil {
		t.Fatal(err)
	}
	s, _ := sense.NewCoupler(c, c.Calibration())
	r, err := s.Read(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if got := r.SWR(); math.Abs(got-1.5) > 0.002 {
		t.Errorf("SWR %g, want 1.5 (quantisation only)", got)
	}
	if got := clk.Since(vclock.Epoch); got != 2*1163*time.Microsecond {
		t.Errorf("a multiplexed read took %v, want two conversions", got)
	}
	if c.Reads() != 1 {
		t.Errorf("reads %d", c.Reads())
	}
}

func TestDirectivityFloor(t *testing.T) {
	// Common practice: with directivity D the lowest measurable |Γ| is about 10^(−D/20), here
	// SWR (1+0.0316)/(1−0.0316) = 1.065 for 30 dB, on a perfect load.
	clk := vclock.New(vclock.Epoch)
	c, _ := New(clk, func() (float64, complex128) { return 5, 0 }, opts())
	s, _ := sense.NewCoupler(c, c.Calibration())
	r, _ := s.Read(context.Background())
	if got := r.SWR(); math.Abs(got-1.065) > 0.003 {
		t.Errorf("perfect load reads SWR %g, want the 30 dB directivity floor 1.065", got)
	}
}

func TestNoCarrierReadsFloor(t *testing.T) {
	clk := vclock.New(vclock.Epoch)
	o := opts()
	o.ADC.Noise = 1e-3
	c, _ := New(clk, func() (float64, complex128) { return 0, 0.5 }, o)
	s, _ := sense.NewCoupler(c, c.Calibration())
	r, _ := s.Read(context.Background())
	// −75 dBm floor × 30 dB coupling = −45 dBm on the line: about 32 nW, give or take noise.
	if w := sense.Watts(r.Forward); w > 1e-7 {
		t.Errorf("no carrier reads %g W forward, want the floor (tens of nW)", w)
	}
}

func TestNoiseIsSeededAndSized(t *testing.T) {
	run := func(seed uint64) []float64 {
		clk := vclock.New(vclock.Epoch)
		o := opts()
		o.ADC.Noise = 2e-3
		o.Seed = seed
		c, _ := New(clk, func() (float64, complex128) { return 5, 0.3 }, o)
		var vs []float64
		for range 2000 {
			v, _ := c.Read(context.Background())
			vs = append(vs, v.Reflected)
		}
		return vs
	}
	a, b := run(7), run(7)
	for i := range a {
		if a[i] != b[i] {
			t.Fatal("same seed gave a different run")
		}
	}
	mean, sq := 0.0, 0.0
	for _, v := range a {
		mean += v
	}
	mean /= float64(len(a))
	for _, v := range a {
		sq += (v - mean) * (v - mean)
	}
	sd := math.Sqrt(sq / float64(len(a)-1))
	// The rms of 2000 samples of 2 mV noise plus quantisation (LSB/√12 = 18 µV) lies within
	// 2 mV·(1 ± 5 %) with overwhelming probability (the standard error of a standard deviation is
	// σ/√(2n) = 1.6 %).
	if sd < 1.9e-3 || sd > 2.1e-3 {
		t.Errorf("noise rms %g V, want 2 mV", sd)
	}
}

func BenchmarkRead(b *testing.B) {
	clk := vclock.New(vclock.Epoch)
	o := opts()
	o.ADC.Noise = 1e-3
	c, _ := New(clk, func() (float64, complex128) { return 5, 0.1 }, o)
	ctx := context.Background()
	for b.Loop() {
		_, _ = c.Read(ctx)
	}
}

// NaN fails every comparison, so a check written as "x < lo || x > hi" lets it through.
func TestValidateRejectsNonFinite(t *testing.T) {
	if err := opts().Validate(); err != nil {
		t.Fatalf("the test options fail: %v", err)
	}
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		for _, c := range []struct {
			what string
			set  func(o *Options)
		}{
			{"coupling", func(o *Options) { o.CouplingDB = bad }},
			{"directivity", func(o *Options) { o.DirectivityDB = bad }},
			{"leak phase", func(o *Options) { o.LeakPhase = bad }},
			{"adc full scale", func(o *Options) { o.ADC.FullScale = bad }},
			{"adc noise", func(o *Options) { o.ADC.Noise = bad }},
			{"forward detector intercept", func(o *Options) { o.Forward.Intercept = bad }},
			{"reflected detector ceiling", func(o *Options) { o.Reflected.Ceiling = bad }},
			{"forward detector sensitivity", func(o *Options) { o.Forward.Sensitivity = bad }},
		} {
			o := opts()
			c.set(&o)
			err := o.Validate()
			if err == nil || !strings.Contains(err.Error(), c.what+" ") || !strings.Contains(err.Error(), "want") {
				t.Errorf("%s = %g: %v", c.what, bad, err)
			}
		}
	}
}
