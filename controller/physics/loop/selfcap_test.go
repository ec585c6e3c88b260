package loop

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mathext"
)

func TestToroidalQ(t *testing.T) {
	// Q_{−½}(x) = √(2/(x+1))·K(√(2/(x+1))), against a general-purpose reference library
	// (gonum mathext, Carlson's symmetric forms; it takes the parameter m = k²); and every
	// degree against the integral representation Q_{n−½}(x) = (1/√2)·∫₀^π cos(nψ)/√(x − cos ψ) dψ
	// (NIST Digital Library of Mathematical Functions, chapter 14, toroidal functions),
	// integrated numerically: it shares no code with the recurrence.
	midpoint := func(n int, x float64) float64 {
		const steps = 400000
		h := math.Pi / steps
		s := 0.0
		for i := range steps {
			p := (float64(i) + 0.5) * h
			s += math.Cos(float64(n)*p) / math.Sqrt(x-math.Cos(p))
		}
		return s * h / math.Sqrt2
	}
	for _, x := range []float64{1.004, 1.2, 3} { // turns 10 cm apart on a 2.3 m loop; far apart
		q := toroidalQ(x, 40)
		k2 := 2 / (x + 1)
		near(t, "Q_{−½} vs gonum", q[0], math.Sqrt(k2)*mathext.CompleteK(k2), 1e-12)
		for _, n := range []int{0, 1, 2, 7, 20, 40} {
			want := midpoint(n, x)
			if math.Abs(want) < 1e-8 { // beyond what the quadrature resolves
				continue
			}
			near(t, "Q_{n−½} vs its integral", q[n], want, 1e-6)
		}
	}
}

func TestBesselI0K0(t *testing.T) {
	// Against the integral representations I0(x) = (1/π)·∫₀^π e^{x·cos θ} dθ and
	// K0(x) = ∫₀^∞ e^{−x·cosh t} dt (Abramowitz & Stegun 9.6.16 and 9.6.24), integrated
	// numerically.
	for _, x := range []float64{0.01, 0.1, 0.5, 1, 2} {
		const steps = 200000
		i0 := 0.0
		for i := range steps {
			i0 += math.Exp(x * math.Cos((float64(i)+0.5)*math.Pi/steps))
		}
		i0 /= steps
		k0, h := 0.0, 40.0/steps // the integrand is below e^{−x·cosh 40}, nothing, past t = 40
		for i := range steps {
			k0 += math.Exp(-x*math.Cosh((float64(i)+0.5)*h)) * h
		}
		gi, gk := besselI0K0(x)
		near(t, "I0", gi, i0, 1e-9)
		near(t, "K0", gk, k0, 1e-7)
	}
	// Abramowitz & Stegun table 9.8 (values from memory): I0(1) = 1.266065878,
	// K0(1) = 0.4210244382.
	i0, k0 := besselI0K0(1)
	near(t, "I0(1)", i0, 1.266065878, 1e-9)
	near(t, "K0(1)", k0, 0.4210244382, 1e-9)
}

// Storer's kernel for a charge spread round the conductor's surface and the reduced kernel (the
// charge on the conductor's axis, the potential on its surface: coaxial filaments the
// conductor's radius apart, as for the RF self-inductance) must agree while the harmonic's
// period along the turn is long against the conductor, nb/a ≪ 1; their difference is of order
// (nb/a)²·ln(a/nb).
func TestStorerKernelIsTheReducedKernelForLongPeriods(t *testing.T) {
	a, b := 1.15, 0.011
	q := toroidalQ(1+b*b/(2*a*a), 10)
	odd := 0.0
	for n := 1; n <= 10; n++ {
		odd += 1 / float64(2*n-1)
		x := float64(n) * b / a
		i0, k0 := besselI0K0(x)
		storer := i0*k0 + math.Log(4*float64(n)) + eulerGamma - 2*odd
		near(t, "Storer vs reduced kernel", storer, q[n], 2*x*x*math.Log(1/x)+1e-9)
	}
	near(t, "n = 0: ln(8a/b)", q[0], math.Log(8*a/b), 1e-4)
}

// electrostatic solves, by brute force, for the charge that holds a potential rising evenly
// along the conductor from −½ V to +½ V, and returns the capacitance 2W/V² of its energy. The
// conductor is the real winding, a helix of the turns' pitch (turns > 1), or a ring with a gap
// of the given length (one turn); it is cut into straight pieces of length h, each with its own
// even charge, whose potential at the other pieces' middles is integrated exactly (the reduced
// kernel: the charge on the conductor's axis, the potential on its surface). It shares no code
// with SelfCapacitance.
func electrostatic(g Geometry, h, gap float64) float64 {
	a, b := g.Diameter/2, g.ConductorDiameter/2
	var nodes [][3]float64
	from, to, rise := 0.0, 2*math.Pi*float64(g.Turns), g.Spacing/(2*math.Pi)
	if g.Turns == 1 {
		from, to, rise = gap/(2*a), 2*math.Pi-gap/(2*a), 0
	}
	m := int(math.Ceil((to - from) * a / h))
	for i := 0; i <= m; i++ {
		th := from + (to-from)*float64(i)/float64(m)
		nodes = append(nodes, [3]float64{a * math.Cos(th), a * math.Sin(th), rise * th})
	}
	sub := func(p, q [3]float64) [3]float64 { return [3]float64{p[0] - q[0], p[1] - q[1], p[2] - q[2]} }
	dotv := func(p, q [3]float64) float64 { return p[0]*q[0] + p[1]*q[1] + p[2]*q[2] }
	length := make([]float64, m)
	for j := range m {
		length[j] = math.Sqrt(dotv(sub(nodes[j+1], nodes[j]), sub(nodes[j+1], nodes[j])))
	}
	p := make([][]float64, m)
	phi := make([]float64, m)
	along := 0.0
	total := 0.0
	for _, l := range length {
		total += l
	}
	for i := range m {
		mid := [3]float64{(nodes[i][0] + nodes[i+1][0]) / 2, (nodes[i][1] + nodes[i+1][1]) / 2, (nodes[i][2] + nodes[i+1][2]) / 2}
		phi[i] = (along+length[i]/2)/total - 0.5
		along += length[i]
		p[i] = make([]float64, m)
		for j := range m {
			u := sub(nodes[j+1], nodes[j])
			d := sub(mid, nodes[j])
			t0 := dotv(d, u) / length[j]
			c := math.Sqrt(dotv(d, d) - t0*t0 + b*b)
			p[i][j] = (math.Asinh((length[j]-t0)/c) + math.Asinh(t0/c)) / (4 * math.Pi * Eps0)
		}
	}
	lambda := solve(p, phi)
	w := 0.0
	for j := range m {
		w += lambda[j] * length[j] * phi[j] / 2
	}
	return 2 * w
}

func TestSelfCapacitanceAgainstTheWindingItself(t *testing.T) {
	// Windings: the demo's two turns, the three-turn 1 m loop, four close turns. The brute
	// force solves the real helix, connected turn to turn, with pieces of two conductor
	// diameters; SelfCapacitance idealises it as coaxial rings (the pitch ignored, as for the
	// inductance). They agree within 1.5 %: the pitch and the pieces' length.
	for _, g := range []Geometry{
		{Turns: 2, Diameter: 2.3, ConductorDiameter: 0.022, Spacing: 0.10},
		{Turns: 3, Diameter: 1.0, ConductorDiameter: 0.015, Spacing: 0.05},
		{Turns: 4, Diameter: 1.0, ConductorDiameter: 0.010, Spacing: 0.03},
	} {
		near(t, "winding self-capacitance", g.SelfCapacitance(), electrostatic(g, 2*g.ConductorDiameter, 0), 0.015)
	}
	// A single ring: the field across a gap of one conductor diameter, which SelfCapacitance
	// leaves to the leads, is the difference: under 5 %.
	for _, g := range []Geometry{
		{Turns: 1, Diameter: 2.3, ConductorDiameter: 0.022},
		{Turns: 1, Diameter: 1.6, ConductorDiameter: 0.028},
	} {
		near(t, "ring self-capacitance", g.SelfCapacitance(), electrostatic(g, 2*g.ConductorDiameter, g.ConductorDiameter), 0.05)
	}
}

func TestSelfCapacitanceIsMostlyBetweenTheTurns(t *testing.T) {
	// With the potential rising evenly along two turns, every point of one turn is V/2 from
	// the point beside it on the other: a quarter of the energy the two turns hold as two
	// parallel wires at V, whose capacitance per length is πε0/acosh(s/d) (the two-wire line:
	// Ramo, Whinnery & Van Duzer, Fields and Waves in Communication Electronics). For the demo's
	// turns that is 22.9 pF (computed by hand from the formula). Each turn's own share, across
	// the gap, adds at most what a single ring holds at V/2 on each turn, half the ring's.
	for _, g := range []Geometry{
		{Turns: 2, Diameter: 2.3, ConductorDiameter: 0.022, Spacing: 0.10},
		{Turns: 2, Diameter: 2.3, ConductorDiameter: 0.022, Spacing: 0.05},
		{Turns: 2, Diameter: 1.0, ConductorDiameter: 0.015, Spacing: 0.15},
	} {
		between := math.Pi * Eps0 / math.Acosh(g.Spacing/g.ConductorDiameter) * math.Pi * g.Diameter / 4
		ring := g
		ring.Turns = 1
		c := g.SelfCapacitance()
		if c < 0.99*between || c > between+ring.SelfCapacitance()/2 {
			t.Errorf("%+v: %.2f pF, want %.2f pF between the turns plus at most %.2f pF", g, c*1e12, between*1e12, ring.SelfCapacitance()/2*1e12)
		}
	}
	g := Geometry{Turns: 2, Diameter: 2.3, ConductorDiameter: 0.022, Spacing: 0.10}
	near(t, "demo, between the turns", math.Pi*Eps0/math.Acosh(g.Spacing/g.ConductorDiameter)*math.Pi*g.Diameter/4, 22.9e-12, 2e-3)
}

func TestSelfCapacitanceOfARing(t *testing.T) {
	// Storer's series in its static limit is C = 2ε0·a·Σ 1/(n²·K̃n), whose first term alone,
	// with K̃1 ≈ ln(8a/b) − 2 (the ring's inductance factor), is 4.3 pF for the 2.3 m ring of
	// 22 mm tube (computed by hand); the higher harmonics add a little less again.
	g := Geometry{Turns: 1, Diameter: 2.3, ConductorDiameter: 0.022}
	first := 2 * Eps0 * 1.15 / (math.Log(8*1.15/0.011) - 2)
	near(t, "first harmonic", first, 4.3e-12, 0.01)
	if c := g.SelfCapacitance(); c < 1.5*first || c > 2.5*first {
		t.Errorf("ring of 2.3 m: %.2f pF, want between 1.5 and 2.5 times the first harmonic's %.2f pF", c*1e12, first*1e12)
	}
	// It scales with the size: twice the ring, twice the capacitance.
	big := Geometry{Turns: 1, Diameter: 4.6, ConductorDiameter: 0.044}
	near(t, "scaling", big.SelfCapacitance(), 2*g.SelfCapacitance(), 1e-9)
	// A geometry that does not validate has none.
	if c := (Geometry{Turns: 0, Diameter: 1, ConductorDiameter: 0.01}).SelfCapacitance(); !math.IsNaN(c) {
		t.Errorf("invalid geometry: %g, want NaN", c)
	}
}

// The capacitance the loop needs falls by the winding's own, which grows with the copper.
func TestSelfCapacitanceInTheModel(t *testing.T) {
	m := commonLoop()
	m.Stray = 3e-12
	f := 3.75e6
	e := m.At(f, 1, 20)
	w := 2 * math.Pi * f
	near(t, "parallel at 20 °C", e.Parallel, m.SelfCapacitance+m.Stray, 1e-12)
	near(t, "LC resonance", e.Capacitance+e.Parallel, 1/(w*w*e.Inductance), 1e-12)
	hot := m.At(f, 1, 60)
	near(t, "parallel at 60 °C", hot.Parallel, m.Stray+m.SelfCapacitance*(1+40*Copper.Expansion), 1e-12)
	if y := m.Detuning(f, e.Capacitance, 20); math.Abs(y) > 1e-9 {
		t.Errorf("detuning %g with the capacitance the model asks for", y)
	}
	m.SelfCapacitance = math.NaN()
	if err := m.Validate(); err == nil || !contains(err.Error(), "self-capacitance") {
		t.Errorf("NaN self-capacitance: %v", err)
	}
}
