package sim

import (
	"math"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim/capacitor"
)

// Prior predicts the dip from the station description alone: the capacitance the loop's
// model needs, through the capacitor's law and the gearing, to a motor position. It is what
// the controller has before it has learned anything. Real loops differ from their drawings
// (stray capacitance, the exact inductance, the capacitor's true law), and Tolerance says by
// how much: the prior's σ covers it honestly.
type Prior struct {
	rf           *RF
	stepsPerTurn float64
	offset       float64 // motor position of the capacitor's minimum, final-approach side
	tol          Tolerance
	temp         float64
}

// Tolerance is how far the real station may be from its description, 1 σ.
type Tolerance struct {
	Capacitance float64 // fractional error of the capacitance needed (inductance, law); e.g. 0.03
	StrayPF     float64 // error of the stray capacitance, pF
}

// DefaultTolerance is a builder's first guess at a loop from its drawing (common practice:
// a few percent on the inductance, a few pF on the strays).
var DefaultTolerance = Tolerance{Capacitance: 0.03, StrayPF: 3}

// NewPrior builds the prior for s. offset is the motor position, on the final-approach side
// of the gear play, at which the capacitor shaft is at its minimum; temp is the temperature
// the description holds for, °C.
func NewPrior(s Spec, offset float64, tol Tolerance, temp float64) (*Prior, error) {
	rf, err := s.RF()
	if err != nil {
		return nil, err
	}
	return &Prior{rf: rf, stepsPerTurn: s.StepsPerTurn(), offset: offset, tol: tol, temp: temp}, nil
}

// Predict implements memmap.Prior.
func (p *Prior) Predict(f physic.Frequency) (memmap.Prediction, bool) {
	fHz := float64(f) / float64(physic.Hertz)
	if !(fHz > 0) {
		return memmap.Prediction{}, false
	}
	el := p.rf.Electrical(fHz, 1, p.temp)
	turns, ok := p.rf.DipTurns(fHz, p.temp)
	if !ok {
		// The capacitor cannot reach it: say where its law, carried on past the nearer end,
		// would put the dip, so that the controller refuses the frequency without transmitting.
		c := p.rf.Capacitor()
		span := c.Options().Span
		lo, hi := c.At(0, p.temp), c.At(span, p.temp)
		switch {
		case !(el.Capacitance == el.Capacitance) || math.IsInf(el.Capacitance, 0):
			return memmap.Prediction{}, false
		case el.Capacitance < lo:
			turns = (el.Capacitance - lo) / c.Slope(0)
		default:
			turns = span + (el.Capacitance-hi)/c.Slope(span)
		}
	}
	cTotal := el.Capacitance + p.rf.Model().Stray
	slopeC := p.rf.Capacitor().Slope(math.Min(math.Max(turns, 0), p.rf.Capacitor().Options().Span)) // F per turn
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

// LawBend is how far, in steps, the capacitor's true law may stray from a smooth model fitted
// to it: 0.1 % of the travel for a capacitor described by a straight law (the real one bows a
// little), 0.5 % for one described by a table (common practice; a measured table is only so
// good). It is the memory map's Bend.
func (s Spec) LawBend() float64 {
	share := 0.001
	if len(s.Capacitor.Table) > 0 {
		share = 0.005
	}
	return share * s.Capacitor.SpanTurns * s.StepsPerTurn()
}

// NominalBacklash is the play a controller assumes before a calibration has measured it: the
// described play and half again, as an upper bound (a run-up that falls short of the real play
// leaves the capacitor on the wrong side of it).
func (s Spec) NominalBacklash() motion.Steps {
	return motion.Steps(s.Drive.BacklashSteps*1.5) + 4
}

// MapOptions are the memory map's options for this station: the physics prior (with tol, at the
// description's mean temperature) and the capacitor law's bend.
func (s Spec) MapOptions(tol Tolerance) (memmap.Options, error) {
	p, err := s.Prior(tol, s.Environment.MeanC)
	if err != nil {
		return memmap.Options{}, err
	}
	return memmap.Options{Prior: p, Bend: s.LawBend()}, nil
}

// TunerOptions fills in what the description says about the station: whether there is a home
// switch, whether the capacitor has hard stops, and the nominal play.
func (s Spec) TunerOptions(o tune.Options, nominal motion.Steps) tune.Options {
	o.HasHome = s.Drive.Home != nil
	o.HardStops = s.Capacitor.Travel == capacitor.Stops.String()
	o.NominalBacklash = nominal
	return o
}
