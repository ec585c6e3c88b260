package station

import (
	"fmt"
	"math"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/physics/capacitor"
	"github.com/tankd/tankd/controller/physics/loop"
)

// Prior predicts the dip from the station description alone: the capacitance the loop's
// model needs, through the capacitor's law and the gearing, to a motor position. It is what
// the controller has before it has learned anything. The description's Tolerance says how far
// the real station may be from it, and the prior's σ covers that honestly. A frequency beyond
// the capacitor's range is predicted where its law, carried on past the nearer end, would put
// the dip (outside the travel), so that the controller refuses it without transmitting.
//
// A Prior is immutable and safe for concurrent use (memmap.Prior).
type Prior struct {
	model        loop.Model
	cap          *capacitor.Capacitor
	stepsPerTurn float64
	offset       float64 // motor position of the capacitor's minimum, final-approach side
	tol          Tolerance
	temp         float64
}

// Prior builds the physics prior for a loop at temp °C, in the axis coordinates AxisOptions
// sets up: the capacitor's minimum lies half the described play above motor position 0.
func (d Description) Prior(temp float64) (*Prior, error) {
	m := d.Model()
	if err := m.Validate(); err != nil {
		return nil, fmt.Errorf("physics prior: %w", err)
	}
	c, err := d.CapacitorModel()
	if err != nil {
		return nil, fmt.Errorf("physics prior: %w", err)
	}
	return &Prior{model: m, cap: c, stepsPerTurn: d.StepsPerTurn(), offset: d.ShaftLag(), tol: d.Tolerance, temp: temp}, nil
}

// Predict implements memmap.Prior.
func (p *Prior) Predict(f physic.Frequency) (memmap.Prediction, bool) {
	fHz := float64(f) / float64(physic.Hertz)
	if !(fHz > 0) {
		return memmap.Prediction{}, false
	}
	el := p.model.At(fHz, 1, p.temp)
	turns, ok := p.cap.TurnsFor(el.Capacitance, p.temp)
	if !ok {
		// The capacitor cannot reach it: say where its law, carried on past the nearer end,
		// would put the dip, so that the controller refuses the frequency without transmitting.
		span := p.cap.Options().Span
		lo, hi := p.cap.At(0, p.temp), p.cap.At(span, p.temp)
		switch {
		case math.IsNaN(el.Capacitance) || math.IsInf(el.Capacitance, 0):
			return memmap.Prediction{}, false
		case el.Capacitance < lo:
			turns = (el.Capacitance - lo) / p.cap.Slope(0)
		default:
			turns = span + (el.Capacitance-hi)/p.cap.Slope(span)
		}
	}
	cTotal := el.Capacitance + el.Parallel
	slopeC := p.cap.Slope(math.Min(math.Max(turns, 0), p.cap.Options().Span)) // F per turn
	// C ∝ 1/f²: dC/df = −2C/f.
	stepsPerFarad := p.stepsPerTurn / slopeC
	dc := math.Hypot(p.tol.Capacitance*cTotal, p.tol.StrayPF*1e-12)
	return memmap.Prediction{
		Pos:    p.offset + turns*p.stepsPerTurn,
		Sigma:  dc * stepsPerFarad,
		Slope:  -2 * cTotal / fHz * stepsPerFarad,
		Q:      el.QLoaded,
		Source: memmap.SourcePrior,
	}, true
}
