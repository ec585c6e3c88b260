package loop

import "math"

// Eps0 is the vacuum permittivity, F/m: 1/(μ0·c²).
const Eps0 = 1 / (Mu0 * LightSpeed * LightSpeed)

// eulerGamma is the Euler–Mascheroni constant γ.
const eulerGamma = 0.57721566490153286

// SelfCapacitance is the winding's own capacitance as the tuning capacitor sees it, F: the
// capacitance of the loop across its gap and between its turns, in parallel with the capacitor.
// Leads, the capacitor's frame and other fittings are not in it (Model.Stray).
//
// A small loop carries the same current all along its conductor, so the voltage induced along
// it rises evenly from one terminal to the other. SelfCapacitance is the electrostatic energy of
// the charge that holds that potential on the winding, W, as a capacitance 2W/V². The turns are
// coaxial rings, as for the inductance. The potential on each ring is split into its mean (a
// staircase from turn to turn, which charges the turns against each other) and the same
// sawtooth on every ring (within a turn, which charges each turn against itself, as across the
// gap of a single ring); each Fourier harmonic n around the rings is independent.
//
//   - The potential coefficients of coaxial rings of radius a, planes d apart, for a charge
//     varying as cos(nφ), are Q_{n−½}(1 + d²/2a²)/(2πε0), Q the toroidal (Legendre) function of
//     the second kind; for n = 0 this is the potential of a uniformly charged ring (Smythe,
//     Static and Dynamic Electricity, the coaxial-ring potential in complete elliptic integrals).
//   - A ring's coefficient on itself, for a conductor of radius b, is Storer's thin-wire kernel
//     in its static limit (J. E. Storer, "Impedance of thin-wire loop antennas", Trans. AIEE
//     75, 1956): ln(8a/b)/(2πε0) for n = 0 and
//     [K0(nb/a)·I0(nb/a) + ln 4n + γ − 2·Σ_{m<n} 1/(2m+1)]/(2πε0) for n ≥ 1.
//
// For a single ring this is the low-frequency limit of Storer's Fourier-series admittance,
// C = 2ε0·a·Σ 1/(n²·K̃n) with K̃n the bracket above; for two rings the staircase alone is a
// quarter of the capacitance between the turns as two parallel wires, πε0·πD/acosh(s/d) (the
// energy of V/2 between them), and it dominates: a two-turn loop's self-capacitance is mostly
// between its turns.
//
// The sum over harmonics is taken to n = a/b, harmonics whose half-period along the turn is at
// least the conductor's half-girth. Beyond that it grows as 4ε0·b·ln(n·b/a): that is the field
// between the conductor's two cut ends across the gap, which depends on how the gap and the
// capacitor's terminals are built, and belongs with the leads (Model.Stray).
//
// It is NaN for a geometry that does not validate.
func (g Geometry) SelfCapacitance() float64 {
	if g.Validate() != nil {
		return math.NaN()
	}
	a, b := g.Diameter/2, g.ConductorDiameter/2
	n := g.Turns
	nmax := min(max(1, int(a/b)), maxHarmonics)
	// Toroidal functions for every distance between two turns, d = k·Spacing.
	q := make([][]float64, n)
	for k := 1; k < n; k++ {
		d := float64(k) * g.Spacing
		q[k] = toroidalQ(1+d*d/(2*a*a), nmax)
	}
	// P̃ is the dimensionless potential-coefficient matrix (2πε0 times the coefficients).
	p := make([][]float64, n)
	for i := range p {
		p[i] = make([]float64, n)
	}
	fill := func(self float64, h int) {
		for i := range n {
			for j := range n {
				if i == j {
					p[i][j] = self
				} else {
					p[i][j] = q[abs(i-j)][h]
				}
			}
		}
	}
	c := 0.0
	if n > 1 {
		// The staircase: turn k's mean potential is ((2k−1)/2N − ½)·V, k = 1..N.
		mu := make([]float64, n)
		for k := range n {
			mu[k] = (2*float64(k)+1)/(2*float64(n)) - 0.5
		}
		fill(math.Log(8*a/b), 0)
		c += 4 * math.Pi * math.Pi * Eps0 * a * dot(mu, solve(p, mu))
	}
	ones := make([]float64, n)
	for k := range ones {
		ones[k] = 1
	}
	odd := 0.0 // Σ_{m<h} 1/(2m+1)
	for h := 1; h <= nmax; h++ {
		odd += 1 / float64(2*h-1)
		x := float64(h) * b / a
		i0, k0 := besselI0K0(x)
		fill(i0*k0+math.Log(4*float64(h))+eulerGamma-2*odd, h)
		// The sawtooth θ/2π − ½ on each ring, of amplitude V/N, is −Σ sin(hθ)/(πh).
		c += 2 * Eps0 * a / float64(h*h*n*n) * dot(ones, solve(p, ones))
	}
	return c
}

// maxHarmonics bounds the sum over harmonics for a conductor thinner than a 4,096th of the turn
// radius. The kernel K̃n stays above ½ up to n = a/b (K0(1)·I0(1) = 0.533), so the harmonics
// left out add less than 2ε0·a·2·Σ_{n>4096} 1/n² ≈ 2ε0·a·4.9e-4: under 0.1 pF for a 20 m loop.
const maxHarmonics = 4096

// maxRecurrence bounds the downward recurrence of toroidalQ for turns so close, against the
// turn radius, that Q falls off over more harmonics than any real winding has.
const maxRecurrence = 4_000_000

// toroidalQ returns Q_{n−½}(x) for n = 0..nmax and x > 1: the Legendre functions of the second
// kind of half-integer degree, Q_{n−½}(x) = (1/√2)·∫₀^π cos(nψ)/√(x − cos ψ) dψ. The
// three-term recurrence (n+½)·Q_{n+½} = 2n·x·Q_{n−½} − (n−½)·Q_{n−3/2} is run downwards from
// far above nmax (Q is its decaying solution, which upward recurrence would lose) and scaled to
// Q_{−½}(x) = √(2/(x+1))·K(√(2/(x+1))), K the complete elliptic integral of the first kind.
func toroidalQ(x float64, nmax int) []float64 {
	eta := math.Acosh(x) // Q_{n−½} falls off as e^{−nη}
	start := nmax + int(math.Min(40/eta, maxRecurrence)) + 10
	out := make([]float64, nmax+1)
	hi, mid := 0.0, 1e-300 // Q_{n+½}, Q_{n−½} at n = start, up to a common factor
	for m := start; m >= 1; m-- {
		lo := (2*float64(m)*x*mid - (float64(m)+0.5)*hi) / (float64(m) - 0.5)
		hi, mid = mid, lo
		if m-1 <= nmax {
			out[m-1] = mid
		}
		if math.Abs(mid) > 1e250 { // rescale everything computed so far
			for i := m - 1; i <= nmax; i++ {
				out[i] *= 1e-250
			}
			hi *= 1e-250
			mid *= 1e-250
		}
	}
	k := math.Sqrt(2 / (x + 1))
	K, _ := ellipticKE(k)
	scale := k * K / out[0]
	for i := range out {
		out[i] *= scale
	}
	return out
}

// besselI0K0 returns the modified Bessel functions I0(x) and K0(x) for 0 < x ≤ 2 by their
// power series (Abramowitz & Stegun 9.6.12 and 9.6.13):
// I0(x) = Σ (x²/4)^k/(k!)², K0(x) = −(ln(x/2) + γ)·I0(x) + Σ_{k≥1} H_k·(x²/4)^k/(k!)², H_k the
// k-th harmonic number.
func besselI0K0(x float64) (i0, k0 float64) {
	y := x * x / 4
	term, h := 1.0, 0.0
	i0 = 1
	for k := 1; k < 60; k++ {
		term *= y / float64(k*k)
		h += 1 / float64(k)
		i0 += term
		k0 += h * term
		if term < 1e-17*i0 {
			break
		}
	}
	k0 -= (math.Log(x/2) + eulerGamma) * i0
	return i0, k0
}

// solve returns x with a·x = b for a small symmetric positive definite a (a is overwritten),
// by Gaussian elimination.
func solve(a [][]float64, b []float64) []float64 {
	n := len(b)
	x := append([]float64(nil), b...)
	for i := range n {
		for r := i + 1; r < n; r++ {
			f := a[r][i] / a[i][i]
			for c := i; c < n; c++ {
				a[r][c] -= f * a[i][c]
			}
			x[r] -= f * x[i]
		}
	}
	for i := n - 1; i >= 0; i-- {
		for c := i + 1; c < n; c++ {
			x[i] -= a[i][c] * x[c]
		}
		x[i] /= a[i][i]
	}
	return x
}

func dot(a, b []float64) float64 {
	s := 0.0
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}
