package sim

import (
	"fmt"
	"math"

	"github.com/tankd/tankd/controller/physics/capacitor"
	"github.com/tankd/tankd/controller/physics/loop"
)

// RF answers what the line sees: the reflection coefficient of the loop, through its feed, at
// an operating frequency, a capacitor shaft position and a temperature. It is the simulator's
// hot path (every ADC sample, every point of a plotted curve), so the frequency- and
// temperature-dependent parts are cached and a lookup costs a handful of flops.
//
// RF is not safe for concurrent use: each simulated station owns one.
type RF struct {
	model loop.Model
	feed  loop.Feed
	cap   *capacitor.Capacitor

	f, t  float64 // cache key
	w     float64 // ω
	xl    float64 // ωL
	r     float64 // total series resistance
	par   float64 // capacitance across the capacitor besides its own
	ratio float64 // feed resistance ratio
}

// tempTolerance is how far the temperature may move before the cache is refreshed: 2 mK shifts
// the resonance by under 0.02 ppm.
const tempTolerance = 0.002

// NewRF validates the parts and returns an evaluator.
func NewRF(m loop.Model, fd loop.Feed, c *capacitor.Capacitor) (*RF, error) {
	if err := m.Validate(); err != nil {
		return nil, fmt.Errorf("rf: %w", err)
	}
	if err := fd.Validate(); err != nil {
		return nil, fmt.Errorf("rf: %w", err)
	}
	return &RF{model: m, feed: fd, cap: c, f: math.NaN()}, nil
}

// Model returns the loop's electrical model.
func (e *RF) Model() loop.Model { return e.model }

// Feed returns the feed model.
func (e *RF) Feed() loop.Feed { return e.feed }

// Capacitor returns the tuning capacitor.
func (e *RF) Capacitor() *capacitor.Capacitor { return e.cap }

func (e *RF) prepare(f, t float64) {
	if f == e.f && math.Abs(t-e.t) < tempTolerance {
		return
	}
	el := e.model.At(f, 0, t)
	e.f, e.t = f, t
	e.w = 2 * math.Pi * f
	e.xl = el.Reactance
	e.r = el.RTotal
	e.par = el.Parallel
	e.ratio = e.feed.Ratio(f)
}

// Detuning is y = X/R at frequency f (Hz), shaft position turns and temperature t (°C).
func (e *RF) Detuning(f, turns, t float64) float64 {
	e.prepare(f, t)
	c := e.cap.At(turns, t) + e.par
	return (e.xl - 1/(e.w*c)) / e.r
}

// Gamma is the complex reflection coefficient on the line.
func (e *RF) Gamma(f, turns, t float64) complex128 {
	y := e.Detuning(f, turns, t)
	return loop.Gamma(e.ratio, y)
}

// Gamma2 is |Γ|² on the line.
func (e *RF) Gamma2(f, turns, t float64) float64 {
	y := e.Detuning(f, turns, t)
	return loop.Gamma2(e.ratio, y)
}

// SWR is the true SWR on the line (no coupler, no noise).
func (e *RF) SWR(f, turns, t float64) float64 { return loop.SWR(e.Gamma2(f, turns, t)) }

// DipTurns is the shaft position of the SWR dip at f and t on the capacitor's rising half
// (0..Span turns); ok is false when the capacitor cannot resonate the loop there.
func (e *RF) DipTurns(f, t float64) (turns float64, ok bool) {
	el := e.model.At(f, 0, t)
	return e.cap.TurnsFor(el.Capacitance, t)
}

// Electrical is the full electrical model at f, power p (W) and t.
func (e *RF) Electrical(f, p, t float64) loop.Electrical { return e.model.At(f, p, t) }
