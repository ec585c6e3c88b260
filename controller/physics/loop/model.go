package loop

import (
	"errors"
	"fmt"
	"math"
)

// Losses are the loop's loss terms besides conductor and radiation loss.
type Losses struct {
	// ExtraOhm is a fixed series loss: capacitor ESR, joints, straps, Ω.
	ExtraOhm float64
	// CapacitorQ, when above zero, adds the tuning capacitor's loss as X_C/Q at resonance.
	CapacitorQ float64
	// GroundOhm is an optional ground-loss term (a loop close to lossy ground), Ω.
	GroundOhm float64
	// Proximity overrides the estimated proximity factor (conductor-loss multiplier) when
	// above zero.
	Proximity float64
}

// Validate reports every problem with l at once. Every comparison is written so that NaN and
// the infinities fail it.
func (l Losses) Validate() error {
	var errs []error
	if !(l.ExtraOhm >= 0 && l.ExtraOhm <= 100) {
		errs = append(errs, fmt.Errorf("extra loss %g Ω: want 0 to 100", l.ExtraOhm))
	}
	// The best vacuum capacitors reach a Q of some tens of thousands (from memory); ten million
	// is a generous ceiling that still keeps the arithmetic finite.
	if !(l.CapacitorQ == 0 || l.CapacitorQ >= 1 && l.CapacitorQ <= 1e7) {
		errs = append(errs, fmt.Errorf("capacitor Q %g: want 0 (lossless) or 1 to 1e7", l.CapacitorQ))
	}
	if !(l.GroundOhm >= 0 && l.GroundOhm <= 100) {
		errs = append(errs, fmt.Errorf("ground loss %g Ω: want 0 to 100", l.GroundOhm))
	}
	if !(l.Proximity == 0 || l.Proximity >= 1 && l.Proximity <= 10) {
		errs = append(errs, fmt.Errorf("proximity factor %g: want 0 (estimate) or 1 to 10", l.Proximity))
	}
	return errors.Join(errs...)
}

// Model is the electrical model of a loop built from its geometry.
type Model struct {
	Geometry  Geometry
	Conductor Conductor
	Losses    Losses
	// Stray is the capacitance in parallel with the tuning capacitor besides the winding's own:
	// leads, the capacitor's frame and fittings, F.
	Stray float64
	// SelfCapacitance is the winding's own capacitance across the capacitor at
	// ReferenceTemperature (Geometry.SelfCapacitance), F; zero leaves it out. It grows with the
	// loop's size as the copper expands.
	SelfCapacitance float64
}

// Validate reports every problem with m at once.
func (m Model) Validate() error {
	errs := []error{m.Geometry.Validate(), m.Conductor.Validate(), m.Losses.Validate()}
	if !(m.Stray >= 0 && m.Stray <= 1e-9) {
		errs = append(errs, fmt.Errorf("stray capacitance %g F: want 0 to 1 nF", m.Stray))
	}
	// A geometry that fails has no self-capacitance to check (it is NaN): said once, above.
	if errs[0] == nil && !(m.SelfCapacitance >= 0 && m.SelfCapacitance <= 1e-9) {
		errs = append(errs, fmt.Errorf("self-capacitance %g F: want 0 to 1 nF", m.SelfCapacitance))
	}
	return errors.Join(errs...)
}

// ParallelAt is the capacitance across the tuning capacitor besides its own at temperature t
// (°C): the winding's own, grown with the copper, and the stray, F.
func (m Model) ParallelAt(t float64) float64 {
	return m.Stray + m.SelfCapacitance*(1+m.Conductor.Expansion*(t-ReferenceTemperature))
}

// InductanceAt is the inductance at temperature t (°C): every dimension grows with the
// conductor's expansion and inductance scales with size.
func (m Model) InductanceAt(t float64) float64 {
	return m.Geometry.Inductance() * (1 + m.Conductor.Expansion*(t-ReferenceTemperature))
}

// SkinDepth is the skin depth δ = √(ρ/(π·f·μ0)) of a non-magnetic conductor, m.
func SkinDepth(resistivity, f float64) float64 {
	return math.Sqrt(resistivity / (math.Pi * f * Mu0))
}

// RadiationResistance of a small loop of n turns of circumference c at wavelength λ:
// R = 20·π²·(c/λ)⁴·n², equivalently 31171·(n·A/λ²)² Ω for area A. Valid while c is small
// against λ (under about a tenth).
func RadiationResistance(turns int, circumference, wavelength float64) float64 {
	r := circumference / wavelength
	n := float64(turns)
	return 20 * math.Pi * math.Pi * r * r * r * r * n * n
}

// Electrical is everything the model says about the loop at one frequency, power and
// temperature, resonated by the right capacitance.
type Electrical struct {
	Frequency   float64 // Hz
	Temperature float64 // °C
	Power       float64 // W delivered to the loop
	Inductance  float64 // H
	Reactance   float64 // X_L, Ω
	Capacitance float64 // tuning capacitance needed (total resonating capacitance minus Parallel), F
	Parallel    float64 // the winding's own capacitance and the stray, across the capacitor, F
	SkinDepth   float64 // m
	Proximity   float64 // conductor-loss multiplier used
	RRad        float64 // radiation resistance, Ω
	RConductor  float64 // conductor (skin and proximity) loss, Ω
	RCapacitor  float64 // capacitor loss from CapacitorQ, Ω
	RExtra      float64 // ExtraOhm + GroundOhm, Ω
	RLoss       float64 // all loss resistance (everything but RRad), Ω
	RTotal      float64 // RRad + RLoss, Ω
	QUnloaded   float64 // X_L / RTotal
	QLoaded     float64 // QUnloaded/2: matched to the line
	Bandwidth   float64 // loaded half-power bandwidth f/QLoaded, Hz
	Efficiency  float64 // RRad / RTotal (0..1)
	Current     float64 // rms loop current √(P/RTotal), A
	VoltageRMS  float64 // rms capacitor voltage X_L·I = √(P·X_L·QUnloaded), V
	VoltagePeak float64 // √2·VoltageRMS, V
}

// EfficiencyDB is the efficiency in decibels (negative).
func (e Electrical) EfficiencyDB() float64 { return 10 * math.Log10(e.Efficiency) }

// At evaluates the model at frequency f (Hz), power p (W) and temperature t (°C). The caller
// validates m first.
func (m Model) At(f, p, t float64) Electrical {
	g := m.Geometry
	w := 2 * math.Pi * f
	lambda := LightSpeed / f
	l := m.InductanceAt(t)
	scale := 1 + m.Conductor.Expansion*(t-ReferenceTemperature) // every length grows alike
	rho := m.Conductor.Resistivity * (1 + m.Conductor.TempCoeff*(t-ReferenceTemperature))

	e := Electrical{Frequency: f, Temperature: t, Power: p, Inductance: l}
	e.Reactance = w * l
	e.Parallel = m.ParallelAt(t)
	e.Capacitance = 1/(w*w*l) - e.Parallel
	e.SkinDepth = SkinDepth(rho, f)
	e.Proximity = m.Losses.Proximity
	if e.Proximity == 0 {
		e.Proximity = g.ProximityFactor()
	}
	circumference := math.Pi * g.Diameter * scale
	e.RRad = RadiationResistance(g.Turns, circumference, lambda)
	rs := rho / e.SkinDepth // surface resistance, Ω per square
	e.RConductor = float64(g.Turns) * circumference * rs / (math.Pi * g.ConductorDiameter * scale) * e.Proximity
	if m.Losses.CapacitorQ > 0 {
		e.RCapacitor = e.Reactance / m.Losses.CapacitorQ // at resonance X_C = X_L
	}
	e.RExtra = m.Losses.ExtraOhm + m.Losses.GroundOhm
	e.RLoss = e.RConductor + e.RCapacitor + e.RExtra
	e.RTotal = e.RRad + e.RLoss
	e.QUnloaded = e.Reactance / e.RTotal
	e.QLoaded = e.QUnloaded / 2
	e.Bandwidth = f / e.QLoaded
	e.Efficiency = e.RRad / e.RTotal
	e.Current = math.Sqrt(p / e.RTotal)
	e.VoltageRMS = e.Reactance * e.Current
	e.VoltagePeak = math.Sqrt2 * e.VoltageRMS
	return e
}

// SmallLoopLimit reports whether the turn circumference is under a tenth of the wavelength
// at f, the usual bound for the small-loop formulas (common practice).
func (m Model) SmallLoopLimit(f float64) bool {
	return math.Pi*m.Geometry.Diameter < LightSpeed/f/10
}

// Detuning is y = X/R for the loop driven at f with tuning capacitance c (F) at temperature t
// (°C): the series reactance over the series resistance, zero at resonance, ±1 at the unloaded
// half-power points.
func (m Model) Detuning(f, c, t float64) float64 {
	e := m.At(f, 0, t)
	w := 2 * math.Pi * f
	x := e.Reactance - 1/(w*(c+e.Parallel))
	return x / e.RTotal
}
