package station

import (
	"math"
	"testing"

	"periph.io/x/conn/v3/physic"
)

func TestPriorSlopeMatchesFiniteDifference(t *testing.T) {
	d := DefaultDescription()
	p, err := d.Prior(20)
	if err != nil {
		t.Fatal(err)
	}
	offset := d.Drive.BacklashSteps / 2 // 20 steps: the capacitor's minimum, up-approach side
	f := 3750 * physic.KiloHertz
	a, ok := p.Predict(f)
	if !ok {
		t.Fatal("no prediction at 3.75 MHz")
	}
	b, _ := p.Predict(f + 100*physic.Hertz)
	fd := (b.Pos - a.Pos) / 100
	if math.Abs(a.Slope-fd) > 1e-3*math.Abs(fd) {
		t.Errorf("slope %g steps/Hz, finite difference %g", a.Slope, fd)
	}
	if a.Slope >= 0 {
		t.Error("more capacitance for a lower frequency: the slope must be negative")
	}
	// SWR ≤ 1.5 window from the loaded Q: BW(1.5) = f·0.5/(Q_u·√1.5) (Yaghjian & Best 2005),
	// Q_u = 2·Q_L; about 4 steps at 3.75 MHz on this drive (the physics of this loop).
	win := math.Abs(a.Slope) * 3.75e6 * 0.5 / (2 * a.Q * math.Sqrt(1.5))
	if win < 2 || win > 8 {
		t.Errorf("SWR 1.5 window %.1f steps at 3.75 MHz", win)
	}
	// 30 MHz needs less than the capacitor's minimum: the prior says so by putting the dip
	// below the shaft's minimum (the offset, 20 steps), far enough that its 3σ does not reach
	// back into the travel, so that a controller refuses it without transmitting.
	if q, ok := p.Predict(30 * physic.MegaHertz); !ok || q.Pos+3*q.Sigma >= offset {
		t.Errorf("30 MHz is beyond the capacitor's range; the prior says %+v, %v", q, ok)
	}
	// and 1 MHz needs more than its maximum: beyond the end of the travel
	span := d.Capacitor.SpanTurns * d.StepsPerTurn()
	if q, ok := p.Predict(1 * physic.MegaHertz); !ok || q.Pos-3*q.Sigma <= offset+span {
		t.Errorf("1 MHz is beyond the capacitor's range; the prior says %+v, %v (travel ends at %.0f)", q, ok, offset+span)
	}
}

// The prior puts the dip where the capacitor makes up what the loop needs beyond the winding's
// own capacitance and the leads: f = 1/(2π·√(L·C)) (the LC resonance, any circuits textbook)
// with C the capacitor's, the winding's and the leads'.
func TestPriorCountsTheWindingsOwnCapacitance(t *testing.T) {
	d := DefaultDescription()
	p, err := d.Prior(20)
	if err != nil {
		t.Fatal(err)
	}
	m := d.Model()
	if m.SelfCapacitance < 20e-12 || m.SelfCapacitance > 30e-12 {
		t.Fatalf("the demo's two turns hold %.1f pF of their own, want the 26 pF or so of two 2.3 m turns 10 cm apart", m.SelfCapacitance*1e12)
	}
	c, err := d.CapacitorModel()
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range []float64{1.85e6, 3.75e6} {
		pr, ok := p.Predict(physic.Frequency(f) * physic.Hertz)
		if !ok {
			t.Fatalf("no prediction at %g Hz", f)
		}
		turns := (pr.Pos - d.ShaftLag()) / d.StepsPerTurn()
		total := c.At(turns, 20) + m.SelfCapacitance + d.Loop.StrayPF*1e-12
		got := 1 / (2 * math.Pi * math.Sqrt(m.InductanceAt(20)*total))
		if math.Abs(got-f) > 1e-6*f {
			t.Errorf("%g Hz: the predicted position resonates at %.1f Hz", f, got)
		}
	}
}
