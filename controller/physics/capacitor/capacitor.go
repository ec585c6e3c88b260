package capacitor

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// Travel says how the shaft may turn.
type Travel int

const (
	// Free: the rotor turns without end (an air variable); capacitance runs from Min to Max
	// over Span turns and back to Min over the next Span, and repeats.
	Free Travel = iota
	// Stops: the shaft has hard end stops Span turns apart (a vacuum variable): Min at 0, Max
	// at Span. Driving into a stop stalls the motor and can damage the capacitor.
	Stops
)

// String returns "free" or "stops".
func (t Travel) String() string {
	if t == Stops {
		return "stops"
	}
	return "free"
}

// ParseTravel parses "free" or "stops".
func ParseTravel(s string) (Travel, error) {
	switch s {
	case "free", "":
		return Free, nil
	case "stops":
		return Stops, nil
	}
	return Free, fmt.Errorf("capacitor travel %q: want free or stops", s)
}

// Point is one entry of a capacitance table: the capacitance at a fraction of the travel from
// minimum (0) to maximum (1).
type Point struct {
	Fraction    float64
	Capacitance float64 // F
}

// Options describe a capacitor.
type Options struct {
	Min, Max  float64 // capacitance at the ends of the travel, F (ignored when Table is set)
	Table     []Point // optional law; fractions 0..1 ascending, capacitances ascending
	Travel    Travel
	Span      float64 // shaft turns from Min to Max (0.5 for a 180° air variable)
	TempCoeff float64 // fractional capacitance change per kelvin from 20 °C
}

// Capacitor is a validated capacitor with its law resampled for constant-time lookup.
type Capacitor struct {
	opts  Options
	grid  []float64 // capacitance at len(grid)-1 equal fractions of the travel
	scale float64   // len(grid)-1
}

// gridSize is how many points the law is resampled to: with 2,048 equal intervals the resampled
// law strays from a table's corners by less than 1/2048 of the travel, far less than a measured
// table is good to, and At stays a constant-time lookup on the simulator's hot path.
const gridSize = 2049

// New validates opts, reporting every problem at once, and prepares the law. Every comparison
// is written so that NaN and the infinities fail it.
func New(opts Options) (*Capacitor, error) {
	var errs []error
	if !(opts.Span > 0) || opts.Span > 100 {
		errs = append(errs, fmt.Errorf("capacitor span %g turns: want more than 0 and at most 100", opts.Span))
	}
	if !(math.Abs(opts.TempCoeff) <= 1e-3) {
		errs = append(errs, fmt.Errorf("capacitor temperature coefficient %g /K: want within ±1000 ppm/K", opts.TempCoeff))
	}
	if len(opts.Table) == 0 {
		if !(opts.Min > 0) || !(opts.Max > opts.Min) || opts.Max > 1e-8 {
			errs = append(errs, fmt.Errorf("capacitor range %g–%g F: want 0 < min < max ≤ 10 nF", opts.Min, opts.Max))
		}
		opts.Table = []Point{{0, opts.Min}, {1, opts.Max}}
	} else if err := checkTable(opts.Table); err != nil {
		errs = append(errs, err)
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	opts.Min, opts.Max = opts.Table[0].Capacitance, opts.Table[len(opts.Table)-1].Capacitance
	c := &Capacitor{opts: opts, grid: make([]float64, gridSize), scale: gridSize - 1}
	for i := range c.grid {
		c.grid[i] = interpolate(opts.Table, float64(i)/c.scale)
	}
	return c, nil
}

func checkTable(tab []Point) error {
	if len(tab) < 2 {
		return fmt.Errorf("capacitor table: want at least 2 points, have %d", len(tab))
	}
	if tab[0].Fraction != 0 || tab[len(tab)-1].Fraction != 1 {
		return fmt.Errorf("capacitor table: fractions must run from 0 to 1, have %g to %g", tab[0].Fraction, tab[len(tab)-1].Fraction)
	}
	var errs []error
	for i, p := range tab {
		if !(p.Fraction >= 0 && p.Fraction <= 1) {
			errs = append(errs, fmt.Errorf("capacitor table point %d: fraction %g: want 0 to 1", i+1, p.Fraction))
		}
		if !(p.Capacitance > 0 && p.Capacitance <= 1e-8) {
			errs = append(errs, fmt.Errorf("capacitor table point %d: capacitance %g F: want more than 0 and at most 10 nF", i+1, p.Capacitance))
		}
		if i > 0 && !(p.Fraction > tab[i-1].Fraction && p.Capacitance > tab[i-1].Capacitance) {
			errs = append(errs, fmt.Errorf("capacitor table point %d: fractions and capacitances must both rise", i+1))
		}
	}
	return errors.Join(errs...)
}

func interpolate(tab []Point, x float64) float64 {
	i := sort.Search(len(tab), func(i int) bool { return tab[i].Fraction >= x })
	if i == 0 {
		return tab[0].Capacitance
	}
	if i == len(tab) {
		return tab[len(tab)-1].Capacitance
	}
	a, b := tab[i-1], tab[i]
	return a.Capacitance + (b.Capacitance-a.Capacitance)*(x-a.Fraction)/(b.Fraction-a.Fraction)
}

// Options returns the options the capacitor was built with (Min and Max filled in).
func (c *Capacitor) Options() Options { return c.opts }

// Fraction is where in its range (0 = Min, 1 = Max) the capacitor is at shaft position turns.
// With free travel the range folds back every Span; with stops it is clamped to the ends.
func (c *Capacitor) Fraction(turns float64) float64 {
	s := c.opts.Span
	if c.opts.Travel == Free {
		p := math.Mod(turns, 2*s)
		if p < 0 {
			p += 2 * s
		}
		if p > s {
			p = 2*s - p
		}
		return p / s
	}
	return math.Min(math.Max(turns/s, 0), 1)
}

// At is the capacitance at shaft position turns and temperature t (°C).
func (c *Capacitor) At(turns, t float64) float64 {
	x := c.Fraction(turns) * c.scale
	i := int(x)
	if i >= len(c.grid)-1 {
		i = len(c.grid) - 2
	}
	f := x - float64(i)
	v := c.grid[i] + (c.grid[i+1]-c.grid[i])*f
	return v * (1 + c.opts.TempCoeff*(t-20))
}

// TurnsFor is the shaft position in [0, Span] (the first rising half of a free capacitor's
// travel) where the capacitance is cap at temperature t; ok is false outside the range.
func (c *Capacitor) TurnsFor(cap, t float64) (turns float64, ok bool) {
	v := cap / (1 + c.opts.TempCoeff*(t-20))
	if v < c.grid[0] || v > c.grid[len(c.grid)-1] {
		return 0, false
	}
	i := sort.SearchFloat64s(c.grid, v)
	if i == 0 {
		return 0, true
	}
	a, b := c.grid[i-1], c.grid[i]
	x := (float64(i-1) + (v-a)/(b-a)) / c.scale
	return x * c.opts.Span, true
}

// Slope is dC/dturn at shaft position turns on the rising half, F per turn.
func (c *Capacitor) Slope(turns float64) float64 {
	x := c.Fraction(turns) * c.scale
	i := min(int(x), len(c.grid)-2)
	return (c.grid[i+1] - c.grid[i]) * c.scale / c.opts.Span
}
