package loop

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mathext"
)

func near(t *testing.T, what string, got, want, relTol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > relTol*math.Abs(want) {
		t.Errorf("%s = %.8g, want %.8g (±%.2g%%)", what, got, want, relTol*100)
	}
}

// Inches and feet to metres (exact by definition of the international inch).
const (
	inch = 0.0254
	foot = 12 * inch
)

func TestEllipticIntegrals(t *testing.T) {
	// Abramowitz & Stegun, Handbook of Mathematical Functions, table 17.1 (parameter m = k²):
	// K(0.5) = 1.85407 46773, E(0.5) = 1.35064 38810; K(0) = E(0) = π/2.
	K, E := ellipticKE(math.Sqrt(0.5))
	near(t, "K(m=0.5)", K, 1.8540746773, 1e-10)
	near(t, "E(m=0.5)", E, 1.3506438810, 1e-10)
	K, E = ellipticKE(0)
	near(t, "K(0)", K, math.Pi/2, 1e-15)
	near(t, "E(0)", E, math.Pi/2, 1e-15)
	// Against a general-purpose reference library (gonum mathext, Carlson's symmetric forms)
	// across the whole range, including the near-singular end that close turns reach.
	for _, k := range []float64{0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.99, 0.999, 0.99999} {
		K, E := ellipticKE(k)
		near(t, "K vs gonum", K, mathext.CompleteK(k*k), 1e-12)
		near(t, "E vs gonum", E, mathext.CompleteE(k*k), 1e-12)
	}
	if K, _ := ellipticKE(1); !math.IsNaN(K) {
		t.Errorf("K(1) = %g, want NaN (diverges)", K)
	}
}

// neumann integrates Neumann's formula M = μ0/(4π)·∮∮ dl₁·dl₂/R numerically for two coaxial
// circles, with the periodic trapezoid rule in both angles (spectrally accurate for smooth
// periodic integrands). It shares no code with MutualInductance.
func neumann(a1, a2, d float64, n int) float64 {
	h := 2 * math.Pi / float64(n)
	sum := 0.0
	for i := range n {
		p1 := float64(i) * h
		x1, y1 := a1*math.Cos(p1), a1*math.Sin(p1)
		dx1, dy1 := -a1*math.Sin(p1), a1*math.Cos(p1)
		for j := range n {
			p2 := (float64(j) + 0.5) * h
			x2, y2 := a2*math.Cos(p2), a2*math.Sin(p2)
			dx2, dy2 := -a2*math.Sin(p2), a2*math.Cos(p2)
			r := math.Sqrt((x1-x2)*(x1-x2) + (y1-y2)*(y1-y2) + d*d)
			sum += (dx1*dx2 + dy1*dy2) / r
		}
	}
	return Mu0 / (4 * math.Pi) * sum * h * h
}

func TestMutualInductanceAgainstNeumann(t *testing.T) {
	for _, c := range []struct{ a1, a2, d float64 }{
		{1.15, 1.15, 0.10}, // two turns of a 2.3 m loop, 10 cm apart
		{1.15, 1.15, 0.30}, // turns one and three
		{0.5, 0.3, 0.2},    // unequal radii
		{1, 1, 2},          // far apart
	} {
		want := neumann(c.a1, c.a2, c.d, 600)
		near(t, "Maxwell vs Neumann", MutualInductance(c.a1, c.a2, c.d), want, 1e-6)
	}
}

func TestMutualInductanceCloseSpacing(t *testing.T) {
	// Grover, Inductance Calculations, coaxial circles of equal radius a close together
	// (d ≪ a): M = μ0·a·[ln(8a/d)·(1 + 3d²/16a²) − 2 − d²/16a²]. The neglected terms are of
	// order (d/a)⁴·ln(a/d), so the agreement must tighten as d shrinks.
	a := 1.0
	for _, c := range []struct{ d, tol float64 }{{0.1, 2e-5}, {0.03, 2e-7}, {0.01, 3e-9}} {
		x := c.d / a
		grover := Mu0 * a * (math.Log(8/x)*(1+3*x*x/16) - 2 - x*x/16)
		near(t, "Maxwell vs Grover close-spacing", MutualInductance(a, a, c.d), grover, c.tol)
	}
}

func TestSelfInductanceIsMutualAtGMD(t *testing.T) {
	// Grover, Inductance Calculations: the self-inductance of a thin circular turn equals the
	// mutual inductance of two coaxial filaments separated by the geometric mean distance of
	// the cross-section from itself; for a surface current on a round conductor (RF, skin
	// effect) the GMD is the conductor radius b.
	// The thin-wire formula drops the second-order terms of Grover's close-spacing series, so
	// the two agree to within those: (3x²/16·ln(8/x) − x²/16)/(ln(8/x) − 2) with x = b/a.
	for _, c := range []struct{ a, b float64 }{{1.15, 0.011}, {0.5, 0.005}, {0.3, 0.0125}} {
		x := c.b / c.a
		tol := 1.1 * (3*x*x/16*math.Log(8/x) - x*x/16) / (math.Log(8/x) - 2)
		near(t, "RF self-inductance", SelfInductanceRF(c.a, c.b), MutualInductance(c.a, c.a, c.b), tol)
	}
}

func TestRadiationResistance(t *testing.T) {
	// Balanis, Antenna Theory (3rd ed.), example 5.1: a small circular loop of radius λ/25 has
	// R_r ≈ 0.788 Ω with one turn and ≈ 50.4 Ω with eight turns (figures from memory of the
	// worked example; they follow from eq. 5-24, R_r = 20π²(C/λ)⁴·N²).
	lambda := 1.0
	c := 2 * math.Pi * lambda / 25
	near(t, "R_r 1 turn, a = λ/25", RadiationResistance(1, c, lambda), 0.788, 1e-3)
	near(t, "R_r 8 turns, a = λ/25", RadiationResistance(8, c, lambda), 50.4, 1e-3)
	// ARRL Antenna Book form: R_r = 31,200·(N·A/λ²)² Ω (the constant 320π⁴ rounded to three
	// figures, so agreement to 0.1 %).
	for _, n := range []int{1, 2, 3} {
		a := 1.15
		lambda := LightSpeed / 3.75e6
		area := math.Pi * a * a
		arrl := 31200 * math.Pow(float64(n)*area/(lambda*lambda), 2)
		near(t, "R_r vs ARRL form", RadiationResistance(n, 2*math.Pi*a, lambda), arrl, 1e-3)
	}
}

func TestSkinDepthOfCopper(t *testing.T) {
	// δ = √(ρ/(π f μ0)) with the CRC Handbook resistivity of copper at 20 °C, 1.678e-8 Ω·m:
	// 65.2 µm at 1 MHz and 8.42 mm at 60 Hz (computed by hand from the handbook value); the
	// commonly quoted 66 µm at 1 MHz (common practice) uses a slightly higher resistivity.
	near(t, "δ(1 MHz)", SkinDepth(Copper.Resistivity, 1e6), 65.20e-6, 1e-3)
	near(t, "δ(60 Hz)", SkinDepth(Copper.Resistivity, 60), 8.417e-3, 1e-3)
	near(t, "δ(1 MHz) vs common 66 µm", SkinDepth(Copper.Resistivity, 1e6), 66e-6, 0.02)
}

// commonLoop is the common-practice build: two turns of 7.5 ft diameter made from one 50 ft
// length of 3/4-inch copper pipe (0.875 in outside diameter, common practice), turns 4 inches
// apart, with its own capacitance.
func commonLoop() Model {
	g := Geometry{Turns: 2, Diameter: 7.5 * foot, ConductorDiameter: 0.875 * inch, Spacing: 4 * inch}
	return Model{Geometry: g, Conductor: Copper, SelfCapacitance: g.SelfCapacitance()}
}

func TestCommonPracticeTwoTurnLoop(t *testing.T) {
	m := commonLoop()
	if err := m.Validate(); err != nil {
		t.Fatal(err)
	}
	if l := m.Geometry.ConductorLength(); l > 50*foot {
		t.Fatalf("the two turns need %.1f ft of pipe, more than the 50 ft length", l/foot)
	}
	// Common practice: it tunes 160 m and 80 m with a few hundred pF at most, with Q in the
	// thousands and a bandwidth of a few kHz or less on 160 m.
	for _, f := range []float64{1.8e6, 2.0e6, 3.5e6, 4.0e6} {
		e := m.At(f, 100, 20)
		if e.Capacitance > 500e-12 || e.Capacitance < 20e-12 {
			t.Errorf("%.2f MHz needs %.0f pF, want a few hundred at most", f/1e6, e.Capacitance*1e12)
		}
		if e.QUnloaded < 1000 || e.QUnloaded > 10000 {
			t.Errorf("%.2f MHz: Q_u = %.0f, want in the thousands", f/1e6, e.QUnloaded)
		}
		if f < 2.1e6 && e.Bandwidth > 5e3 {
			t.Errorf("%.2f MHz: bandwidth %.0f Hz, want a few kHz or less", f/1e6, e.Bandwidth)
		}
	}
}

func TestBandwidthAgainstYaghjianBest(t *testing.T) {
	// Yaghjian & Best, IEEE Trans. Antennas Propag. 53(4), 2005: the matched SWR bandwidth of a
	// resonator is BW(S) = f0·(S−1)/(Q_u·√S). So SWR = (3+√5)/2 at ±f0/(2Q_u) and SWR = 3+2√2
	// at the loaded half-power edges ±f0/(2Q_L) = ±f0/Q_u.
	m := commonLoop()
	f0 := 3.75e6
	c := m.At(f0, 1, 20).Capacitance // resonates at f0
	feed := Feed{DesignFrequency: f0, OctaveSWR: 1.5}
	qu := m.At(f0, 1, 20).QUnloaded
	swrAt := func(f float64) float64 {
		y := m.Detuning(f, c, 20)
		return SWR(Gamma2(feed.Ratio(f), y))
	}
	near(t, "SWR at f0", swrAt(f0), 1, 1e-9)
	golden := (3 + math.Sqrt(5)) / 2
	near(t, "SWR at f0+f0/2Qu", swrAt(f0+f0/(2*qu)), golden, 3e-3)
	near(t, "SWR at f0−f0/2Qu", swrAt(f0-f0/(2*qu)), golden, 3e-3)
	near(t, "SWR at loaded half-power edge (+)", swrAt(f0+f0/qu), 3+2*math.Sqrt2, 3e-3)
	near(t, "SWR at loaded half-power edge (−)", swrAt(f0-f0/qu), 3+2*math.Sqrt2, 3e-3)
	for _, s := range []float64{1.5, 2, 3} {
		bw := f0 * (s - 1) / (qu * math.Sqrt(s))
		lo := bisect(func(f float64) float64 { return swrAt(f) - s }, f0-2*bw, f0)
		hi := bisect(func(f float64) float64 { return swrAt(f) - s }, f0, f0+2*bw)
		near(t, "BW(S) model vs Yaghjian–Best", hi-lo, bw, 3e-3)
	}
}

// bisect finds a root of g in [a, b], where g changes sign.
func bisect(g func(float64) float64, a, b float64) float64 {
	ga := g(a)
	for range 200 {
		m := (a + b) / 2
		gm := g(m)
		if (gm < 0) == (ga < 0) {
			a, ga = m, gm
		} else {
			b = m
		}
	}
	return (a + b) / 2
}

func TestCapacitorVoltageCircuitLaw(t *testing.T) {
	m := commonLoop()
	m.Losses.ExtraOhm = 0.01
	f, p := 1.9e6, 100.0
	e := m.At(f, p, 20)
	// Circuit law, computed independently: P = I²R sets the current; the capacitor carries it
	// at X_C = 1/(ωC) with C the whole resonating capacitance.
	w := 2 * math.Pi * f
	i := math.Sqrt(p / e.RTotal)
	vc := i / (w * (e.Capacitance + e.Parallel))
	near(t, "V_rms = I·X_C", e.VoltageRMS, vc, 1e-9)
	near(t, "V_rms = √(P·X_L·Q_u)", e.VoltageRMS, math.Sqrt(p*e.Reactance*e.QUnloaded), 1e-9)
	near(t, "V_peak = √2·V_rms", e.VoltagePeak, math.Sqrt2*vc, 1e-9)
	// ARRL Antenna Book form √(P·X_L·Q) with Q = X_L/(2R): √2 lower than the circuit law's rms.
	handbook := math.Sqrt(p * e.Reactance * e.Reactance / (2 * e.RTotal))
	near(t, "handbook form", e.VoltageRMS/handbook, math.Sqrt2, 1e-9)
	// Common practice: kilovolts at 100 W on 160 m.
	if e.VoltagePeak < 2000 {
		t.Errorf("peak capacitor voltage %.0f V at 100 W on 160 m, want kilovolts", e.VoltagePeak)
	}
}

func TestTemperatureMovesResonance(t *testing.T) {
	m := commonLoop()
	// Copper expands 17 ppm/K (common practice), so L grows alike and f0 ∝ 1/√(L·C) falls by
	// half that: 8.5 ppm/K, about 32 Hz/K at 3.75 MHz.
	e := m.At(3.75e6, 1, 20)
	c := e.Capacitance + e.Parallel // all of it, held fixed
	l20, l30 := m.InductanceAt(20), m.InductanceAt(30)
	near(t, "ΔL/L over 10 K", l30/l20-1, 170e-6, 1e-9)
	f20 := 1 / (2 * math.Pi * math.Sqrt(l20*c))
	f30 := 1 / (2 * math.Pi * math.Sqrt(l30*c))
	near(t, "Δf per K at 3.75 MHz", (f20-f30)/10, 31.9, 0.01)
	// Conductor loss goes as the surface resistance √(π·f·μ0·ρ) (length and girth grow alike
	// and cancel), so it follows √ρ.
	r20, r60 := m.At(3.75e6, 1, 20).RConductor, m.At(3.75e6, 1, 60).RConductor
	near(t, "R(60 °C)/R(20 °C)", r60/r20, math.Sqrt(1+40*Copper.TempCoeff), 1e-9)
}

func TestValidateReportsEverything(t *testing.T) {
	m := Model{Geometry: Geometry{Turns: 9, Diameter: -1, ConductorDiameter: 0, Spacing: 0}, Conductor: Conductor{}}
	err := m.Validate()
	if err == nil {
		t.Fatal("invalid model accepted")
	}
	for _, key := range []string{"turns 9", "diameter -1", "conductor diameter 0", "resistivity 0"} {
		if !contains(err.Error(), key) {
			t.Errorf("error %q does not mention %q", err, key)
		}
	}
}

// NaN fails every comparison, so a check written as "x < lo || x > hi" lets it through; every
// figure of the model must be refused when it is NaN or infinite.
func TestValidateRejectsNonFinite(t *testing.T) {
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		for _, c := range []struct {
			what string
			set  func(m *Model)
		}{
			{"diameter", func(m *Model) { m.Geometry.Diameter = bad }},
			{"conductor diameter", func(m *Model) { m.Geometry.ConductorDiameter = bad }},
			{"spacing", func(m *Model) { m.Geometry.Spacing = bad }},
			{"resistivity", func(m *Model) { m.Conductor.Resistivity = bad }},
			{"temperature coefficient", func(m *Model) { m.Conductor.TempCoeff = bad }},
			{"expansion", func(m *Model) { m.Conductor.Expansion = bad }},
			{"extra loss", func(m *Model) { m.Losses.ExtraOhm = bad }},
			{"capacitor Q", func(m *Model) { m.Losses.CapacitorQ = bad }},
			{"ground loss", func(m *Model) { m.Losses.GroundOhm = bad }},
			{"proximity factor", func(m *Model) { m.Losses.Proximity = bad }},
			{"stray capacitance", func(m *Model) { m.Stray = bad }},
		} {
			m := commonLoop()
			if err := m.Validate(); err != nil {
				t.Fatalf("the common loop fails: %v", err)
			}
			c.set(&m)
			err := m.Validate()
			if err == nil || !contains(err.Error(), c.what+" ") || !contains(err.Error(), "want") {
				t.Errorf("%s = %g: %v", c.what, bad, err)
			}
		}
		for _, fd := range []Feed{{DesignFrequency: bad, OctaveSWR: 1.4}, {DesignFrequency: 3e6, OctaveSWR: bad}} {
			if err := fd.Validate(); err == nil || !contains(err.Error(), "want") {
				t.Errorf("feed %+v: %v", fd, err)
			}
		}
	}
}

func contains(s, sub string) bool {
	for i := 0; i+len(sub) <= len(s); i++ {
		if s[i:i+len(sub)] == sub {
			return true
		}
	}
	return false
}

func TestProximity(t *testing.T) {
	g := commonLoop().Geometry
	// Two conductors 4 in apart, 0.875 in thick: s/d = 4.57 and the two-conductor result
	// (s/d)/√((s/d)²−1) = 1.0246 (computed by hand).
	near(t, "proximity, two turns", g.ProximityFactor(), 1.0246, 1e-3)
	g.Turns = 1
	if g.ProximityFactor() != 1 {
		t.Error("a single turn has no neighbour")
	}
}
