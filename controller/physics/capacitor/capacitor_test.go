package capacitor

import (
	"math"
	"strings"
	"testing"
)

const pF = 1e-12

func TestLinearLawAndFolding(t *testing.T) {
	c, err := New(Options{Min: 10 * pF, Max: 500 * pF, Span: 0.5, Travel: Free})
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct{ turns, want float64 }{
		{0, 10}, {0.25, 255}, {0.5, 500}, {0.75, 255}, {1, 10}, {1.25, 255}, {-0.25, 255},
	} {
		if got := c.At(tc.turns, 20) / pF; math.Abs(got-tc.want) > 1e-9 {
			t.Errorf("C(%g turns) = %g pF, want %g (linear law folded every half turn)", tc.turns, got, tc.want)
		}
	}
	turns, ok := c.TurnsFor(255*pF, 20)
	if !ok || math.Abs(turns-0.25) > 1e-12 {
		t.Errorf("TurnsFor(255 pF) = %g, %v; want 0.25", turns, ok)
	}
	if _, ok := c.TurnsFor(600*pF, 20); ok {
		t.Error("600 pF is beyond the capacitor's range")
	}
	if s := c.Slope(0.1) / pF; math.Abs(s-980) > 1e-6 {
		t.Errorf("slope %g pF/turn, want 980", s)
	}
}

func TestStopsClampAndDrift(t *testing.T) {
	c, err := New(Options{Min: 5 * pF, Max: 1000 * pF, Span: 16, Travel: Stops, TempCoeff: 50e-6})
	if err != nil {
		t.Fatal(err)
	}
	if got := c.At(20, 20) / pF; math.Abs(got-1000) > 1e-9 {
		t.Errorf("beyond the stop: %g pF, want the maximum", got)
	}
	// 50 ppm/K over 10 K is +0.05 %.
	if got := c.At(16, 30) / pF; math.Abs(got-1000.5) > 1e-9 {
		t.Errorf("C at 30 °C = %g pF, want 1000.5", got)
	}
	turns, ok := c.TurnsFor(1000.5*pF, 30)
	if !ok || math.Abs(turns-16) > 1e-9 {
		t.Errorf("TurnsFor with drift = %g, %v", turns, ok)
	}
}

func TestTableLaw(t *testing.T) {
	tab := []Point{{0, 10 * pF}, {0.5, 60 * pF}, {1, 300 * pF}}
	c, err := New(Options{Table: tab, Span: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	if got := c.At(0.125, 20) / pF; math.Abs(got-35) > 1e-9 {
		t.Errorf("C at a quarter travel = %g pF, want 35 (interpolated)", got)
	}
	if got := c.At(0.375, 20) / pF; math.Abs(got-180) > 1e-9 {
		t.Errorf("C at three quarters = %g pF, want 180", got)
	}
	for _, want := range []float64{12, 35, 59, 61, 180, 299} {
		turns, ok := c.TurnsFor(want*pF, 20)
		if !ok {
			t.Fatalf("TurnsFor(%g pF) out of range", want)
		}
		if got := c.At(turns, 20) / pF; math.Abs(got-want) > 1e-9 {
			t.Errorf("round trip %g pF → %g turns → %g pF", want, turns, got)
		}
	}
}

func TestValidation(t *testing.T) {
	for _, o := range []Options{
		{Min: 10 * pF, Max: 5 * pF, Span: 0.5},
		{Min: 10 * pF, Max: 500 * pF, Span: 0},
		{Table: []Point{{0, 10 * pF}, {0.5, 5 * pF}, {1, 50 * pF}}, Span: 1},
		{Table: []Point{{0.1, 10 * pF}, {1, 50 * pF}}, Span: 1},
	} {
		if _, err := New(o); err == nil {
			t.Errorf("accepted %+v", o)
		}
	}
	// NaN fails every comparison; each of these slipped past checks written as "x > hi".
	nan := math.NaN()
	for _, o := range []Options{
		{Min: 10 * pF, Max: 500 * pF, Span: 0.5, TempCoeff: nan},
		{Min: 10 * pF, Max: 500 * pF, Span: math.Inf(1)},
		{Table: []Point{{0, 10 * pF}, {nan, 100 * pF}, {1, 500 * pF}}, Span: 0.5},
		{Table: []Point{{0, 10 * pF}, {0.5, math.Inf(1)}, {1, 500 * pF}}, Span: 0.5},
	} {
		if _, err := New(o); err == nil || !strings.Contains(err.Error(), "want") {
			t.Errorf("%+v: %v", o, err)
		}
	}
	if _, err := ParseTravel("sideways"); err == nil {
		t.Error("accepted travel sideways")
	}
}

func BenchmarkAt(b *testing.B) {
	c, _ := New(Options{Min: 10 * pF, Max: 500 * pF, Span: 0.5})
	x := 0.0
	for b.Loop() {
		x += c.At(0.123, 21)
	}
	_ = x
}
