package sense

import (
	"context"
	"math"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"
)

func TestSWRConversions(t *testing.T) {
	// SWR = (1+|Γ|)/(1−|Γ|) (definition): |Γ| = 0.2 ↔ 1.5, |Γ| = 1/3 ↔ 2.
	for _, c := range []struct{ g2, swr float64 }{{0, 1}, {0.04, 1.5}, {1.0 / 9, 2}} {
		if got := SWRFromGamma2(c.g2); math.Abs(got-c.swr) > 1e-12 {
			t.Errorf("SWR(|Γ|²=%g) = %g, want %g", c.g2, got, c.swr)
		}
		if got := Gamma2FromSWR(c.swr); math.Abs(got-c.g2) > 1e-12 {
			t.Errorf("|Γ|²(SWR=%g) = %g, want %g", c.swr, got, c.g2)
		}
	}
	r := Reading{Forward: 5 * physic.Watt, Reflected: 200 * physic.MilliWatt}
	if got := r.SWR(); math.Abs(got-1.5) > 1e-9 {
		t.Errorf("5 W forward, 0.2 W reflected: SWR %g, want 1.5", got)
	}
	if !math.IsNaN((Reading{}).SWR()) {
		t.Error("SWR without forward power must be NaN")
	}
	if !math.IsInf(SWRFromGamma2(1), 1) {
		t.Error("total reflection must be SWR +Inf")
	}
}

func logDetector() Detector {
	// A log amplifier of about 25 mV/dB over a 90 dB range (from memory: typical of the parts).
	return Detector{Law: LogLinear, Slope: 0.025, Intercept: -84, Floor: -75, Ceiling: 15}
}

func TestLogDetectorRoundTrip(t *testing.T) {
	d := logDetector()
	if err := d.Validate(); err != nil {
		t.Fatal(err)
	}
	// 0 dBm = 1 mW → 25 mV/dB × 84 dB = 2.1 V.
	if v := d.Volts(1e-3); math.Abs(v-2.1) > 1e-12 {
		t.Errorf("V(0 dBm) = %g, want 2.1", v)
	}
	for _, w := range []float64{1e-10, 1e-6, 1e-3, 0.01} {
		if got := d.Power(d.Volts(w)); math.Abs(got-w) > 1e-9*w {
			t.Errorf("round trip %g W → %g W", w, got)
		}
	}
	// Below the floor the detector cannot tell: it reads the floor.
	if got := d.Power(d.Volts(1e-15)); math.Abs(dBm(got)+75) > 1e-9 {
		t.Errorf("below floor reads %g dBm, want -75", dBm(got))
	}
}

type fixedADC struct{ v Voltages }

func (a fixedADC) Read(context.Context) (Voltages, error) { return a.v, nil }

func TestCouplerReading(t *testing.T) {
	cal := Calibration{CouplingDB: 30, Forward: logDetector(), Reflected: logDetector()}
	// 5 W forward through a 30 dB coupler is 5 mW at the detector (6.99 dBm); 0.2 W reflected
	// is 0.2 mW (−6.99 dBm).
	v := Voltages{At: time.Unix(0, 0), Forward: cal.Forward.Volts(5e-3), Reflected: cal.Reflected.Volts(0.2e-3)}
	c, err := NewCoupler(fixedADC{v}, cal)
	if err != nil {
		t.Fatal(err)
	}
	r, err := c.Read(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(Watts(r.Forward)-5) > 1e-6 || math.Abs(Watts(r.Reflected)-0.2) > 1e-6 {
		t.Errorf("reading %v / %v, want 5 W / 0.2 W", r.Forward, r.Reflected)
	}
	if math.Abs(r.SWR()-1.5) > 1e-6 {
		t.Errorf("SWR %g, want 1.5", r.SWR())
	}
	if _, err := NewCoupler(fixedADC{}, Calibration{CouplingDB: -3}); err == nil {
		t.Error("bad calibration accepted")
	}
}

func TestSquareLaw(t *testing.T) {
	d := Detector{Law: SquareLaw, Sensitivity: 500, MaxVolts: 3.3}
	if err := d.Validate(); err != nil {
		t.Fatal(err)
	}
	if v := d.Volts(2e-3); math.Abs(v-1) > 1e-12 {
		t.Errorf("V(2 mW) = %g, want 1", v)
	}
	if v := d.Volts(1); v != 3.3 {
		t.Errorf("saturation: %g", v)
	}
	if p := d.Power(1); math.Abs(p-2e-3) > 1e-15 {
		t.Errorf("P(1 V) = %g", p)
	}
}

func TestDetectorRefusesNonFiniteValues(t *testing.T) {
	// a working log detector: 25 mV/dB, intercept -84 dBm, range -75 to +15 dBm (common
	// practice for log amplifiers)
	good := Detector{Law: LogLinear, Slope: 0.025, Intercept: -84, Floor: -75, Ceiling: 15}
	if err := good.Validate(); err != nil {
		t.Fatal(err)
	}
	nan, inf := math.NaN(), math.Inf(1)
	for name, d := range map[string]Detector{
		"NaN intercept": {Law: LogLinear, Slope: 0.025, Intercept: nan, Floor: -75, Ceiling: 15},
		"NaN floor":     {Law: LogLinear, Slope: 0.025, Intercept: -84, Floor: nan, Ceiling: 15},
		"Inf ceiling":   {Law: LogLinear, Slope: 0.025, Intercept: -84, Floor: -75, Ceiling: inf},
		"NaN slope":     {Law: LogLinear, Slope: nan, Intercept: -84, Floor: -75, Ceiling: 15},
		"Inf square":    {Law: SquareLaw, Sensitivity: inf, MaxVolts: 3},
		"Inf volts":     {Law: SquareLaw, Sensitivity: 10, MaxVolts: inf},
		"NaN volts":     {Law: SquareLaw, Sensitivity: 10, MaxVolts: nan},
	} {
		if err := d.Validate(); err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}
