package loop

import (
	"errors"
	"fmt"
	"math"
)

// Physical constants (SI).
const (
	Mu0        = 1.25663706212e-6 // vacuum permeability, H/m (CODATA 2018)
	LightSpeed = 299792458.0      // m/s (exact, SI definition)
	Eta0       = Mu0 * LightSpeed // free-space wave impedance, Ω (≈ 376.73)
)

// ReferenceTemperature is the temperature (°C) at which conductor and geometry figures are given.
const ReferenceTemperature = 20.0

// Geometry is the shape of the loop: Turns coaxial circular turns of conductor.
type Geometry struct {
	Turns             int     // 1 to 8
	Diameter          float64 // turn diameter to the conductor's centre line, m
	ConductorDiameter float64 // conductor outside diameter (tube or pipe), m
	Spacing           float64 // centre-to-centre distance between adjacent turns, m (unused for one turn)
}

// Conductor is the material of the loop.
type Conductor struct {
	Resistivity float64 // Ω·m at ReferenceTemperature
	TempCoeff   float64 // resistivity temperature coefficient, 1/K
	Expansion   float64 // linear thermal expansion, 1/K
}

// Copper is annealed copper: resistivity 1.678e-8 Ω·m at 20 °C (CRC Handbook of Chemistry and
// Physics, "Electrical resistivity of pure metals"), temperature coefficient 0.0039/K and
// linear expansion 17e-6/K (both common practice).
var Copper = Conductor{Resistivity: 1.678e-8, TempCoeff: 0.0039, Expansion: 17e-6}

// ErrGeometry is wrapped by every geometry validation error.
var ErrGeometry = errors.New("loop geometry")

// Validate reports every problem with g at once. Every comparison is written so that NaN and
// the infinities fail it.
func (g Geometry) Validate() error {
	var errs []error
	bad := func(format string, args ...any) {
		errs = append(errs, fmt.Errorf("%w: "+format, append([]any{ErrGeometry}, args...)...))
	}
	// One to four turns is usual; a few small loops have more (common practice).
	if g.Turns < 1 || g.Turns > 8 {
		bad("turns %d: want 1 to 8", g.Turns)
	}
	if !(g.Diameter > 0 && g.Diameter <= 20) {
		bad("diameter %g m: want more than 0 and at most 20 m", g.Diameter)
	}
	if !(g.ConductorDiameter > 0) || math.IsInf(g.ConductorDiameter, 1) {
		bad("conductor diameter %g m: want more than 0 and at most a tenth of the turn diameter", g.ConductorDiameter)
	} else if g.Diameter > 0 && g.ConductorDiameter > g.Diameter/10 {
		bad("conductor diameter %g m: want at most a tenth of the turn diameter (%g m) for the thin-wire formulas", g.ConductorDiameter, g.Diameter/10)
	}
	if g.Turns > 1 && !(g.Spacing > g.ConductorDiameter && g.Spacing <= 20) {
		bad("spacing %g m: want more than the conductor diameter (%g m) so that turns do not touch, and at most 20 m", g.Spacing, g.ConductorDiameter)
	}
	return errors.Join(errs...)
}

// Validate reports every problem with c at once.
func (c Conductor) Validate() error {
	var errs []error
	if !(c.Resistivity > 0 && c.Resistivity <= 1e-5) {
		errs = append(errs, fmt.Errorf("conductor resistivity %g Ω·m: want more than 0 and at most 1e-5", c.Resistivity))
	}
	if !(c.TempCoeff >= 0 && c.TempCoeff <= 0.02) {
		errs = append(errs, fmt.Errorf("conductor temperature coefficient %g /K: want 0 to 0.02", c.TempCoeff))
	}
	if !(c.Expansion >= 0 && c.Expansion <= 1e-4) {
		errs = append(errs, fmt.Errorf("conductor expansion %g /K: want 0 to 1e-4", c.Expansion))
	}
	return errors.Join(errs...)
}

// ConductorLength is the length of conductor in the turns, m (leads not counted).
func (g Geometry) ConductorLength() float64 {
	return float64(g.Turns) * math.Pi * g.Diameter
}

// SelfInductanceRF is the self-inductance of one circular turn of round conductor at radio
// frequency, where skin effect confines the current to the surface and there is no internal
// inductance: L = μ0·a·(ln(8a/b) − 2), a the turn radius, b the conductor radius.
func SelfInductanceRF(turnRadius, conductorRadius float64) float64 {
	return Mu0 * turnRadius * (math.Log(8*turnRadius/conductorRadius) - 2)
}

// MutualInductance is the mutual inductance of two coaxial circular filaments of radii a1 and
// a2 whose planes are d apart, by Maxwell's exact formula:
// M = μ0·√(a1·a2)·[(2/k − k)·K(k) − (2/k)·E(k)], k² = 4·a1·a2 / ((a1+a2)² + d²).
func MutualInductance(a1, a2, d float64) float64 {
	k2 := 4 * a1 * a2 / ((a1+a2)*(a1+a2) + d*d)
	k := math.Sqrt(k2)
	K, E := ellipticKE(k)
	return Mu0 * math.Sqrt(a1*a2) * ((2/k-k)*K - (2/k)*E)
}

// Inductance is the loop's total RF inductance at ReferenceTemperature: every turn's
// self-inductance plus twice the mutual inductance of every pair of turns, treated as coaxial
// circles (the pitch of a real winding is ignored).
func (g Geometry) Inductance() float64 {
	a, b := g.Diameter/2, g.ConductorDiameter/2
	n := g.Turns
	l := float64(n) * SelfInductanceRF(a, b)
	for i := range n {
		for j := i + 1; j < n; j++ {
			l += 2 * MutualInductance(a, a, float64(j-i)*g.Spacing)
		}
	}
	return l
}

// ProximityFactor estimates how much the neighbouring turns raise the conductor loss above the
// skin-effect loss of an isolated conductor. Each pair of turns at centre distance s is given
// the exact high-frequency result for two parallel round conductors of diameter d,
// (s/d)/√((s/d)² − 1), and the excess of every pair is summed per turn and averaged. It is an
// engineering estimate (good when s is a few conductor diameters or more, pessimistic when the
// turns almost touch); a measured factor can be configured instead.
func (g Geometry) ProximityFactor() float64 {
	n := g.Turns
	if n < 2 {
		return 1
	}
	excess := 0.0
	for i := range n {
		for j := range n {
			if i == j {
				continue
			}
			x := float64(abs(i-j)) * g.Spacing / g.ConductorDiameter
			excess += x/math.Sqrt(x*x-1) - 1
		}
	}
	return 1 + excess/float64(n)
}

func abs(i int) int {
	if i < 0 {
		return -i
	}
	return i
}
