package station

import (
	"math"
	"time"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
)

// What the controller derives from a description, each in one place. Every figure that tunes
// something is here, with why it has its value.
const (
	// nominalPlayFactor and nominalPlayMarginSteps make the nominal backlash, which the
	// controller assumes until a calibration has measured the play, an upper bound on the
	// described play: half again, and a few steps for a play described as none. A run-up that
	// falls short of the real play leaves the capacitor on the wrong side of it; one too long
	// only costs a few milliseconds.
	nominalPlayFactor      = 1.5
	nominalPlayMarginSteps = 4

	// axisPoll is how often a running move is checked: at 16,000 steps/s a poll every 2 ms sees
	// the motor every 32 steps, a fraction of the run-up past the play, and the axis's own
	// deadline check ends a hung move within a poll.
	axisPoll = 2 * time.Millisecond
	// approachMarginSteps is the run-up beyond the nominal backlash on a final approach. The
	// nominal backlash is already an upper bound on the play, so a margin of a full step at
	// 16 microsteps is enough for the gear to be loaded when the approach arrives; the axis's
	// default (32) is for a play nobody has bounded.
	approachMarginSteps = 16

	// homingSlowSpeed is the re-approach speed onto the home switch, steps/s: the switch edge
	// is found to within the distance travelled in one poll, 0.4 steps at 2 ms.
	homingSlowSpeed = 200
	// homingMinRunSteps is the least distance from the switch to the end stop behind it that
	// the seek speed is planned for, so that a switch described right at the end still gets a
	// usable seek speed.
	homingMinRunSteps = 50
	// homingBackOffHysteresisFactor and homingBackOffPlayFactor set how far homing retreats
	// from the switch before re-approaching it slowly: clear of its hysteresis with room, and
	// clear of the gear play both ways, so that the slow approach arrives with the play taken
	// up; homingBackOffMarginSteps adds the approach's run-up.
	homingBackOffHysteresisFactor = 4
	homingBackOffPlayFactor       = 2
	homingBackOffMarginSteps      = 16

	// straightLawBend and tableLawBend are how far, as a share of the travel, the capacitor's
	// true law may stray from a smooth model fitted to it: 0.1 % for a capacitor described by
	// a straight law (the real one bows a little), 0.5 % for one described by a measured table
	// (common practice: a measured table is only so good).
	straightLawBend = 0.001
	tableLawBend    = 0.005
)

// ShaftLag is how far, in steps, the capacitor shaft trails the motor moving up (and leads it
// moving down): half the described play. The soft limits, the physics prior and homing's home
// position are placed with it, so that up-approach motor positions map to shaft positions.
func (d Description) ShaftLag() float64 { return d.Drive.BacklashSteps / 2 }

// SoftLimits are the axis limits the description asks for: the capacitor's rising range, the
// end margin inside each end, in the up-approach coordinates of the motor (the shaft trails the
// motor by half the play).
func (d Description) SoftLimits() (lo, hi motion.Steps) {
	span := d.Capacitor.SpanTurns * d.StepsPerTurn()
	m := d.Capacitor.EndMarginPct / 100 * span
	half := d.ShaftLag()
	return motion.Steps(math.Ceil(m + half)), motion.Steps(math.Floor(span - m + half))
}

// NominalBacklash is the play a controller assumes before a calibration has measured it: the
// described play and half again, plus a few steps, as an upper bound.
func (d Description) NominalBacklash() motion.Steps {
	return motion.Steps(d.Drive.BacklashSteps*nominalPlayFactor) + nominalPlayMarginSteps
}

// AxisOptions are the motion options the description implies: its planned speed and
// acceleration, settling, soft limits, the given nominal backlash (an upper bound until a
// calibration measures it; usually NominalBacklash), and homing onto the home switch if there
// is one.
func (d Description) AxisOptions(nominal motion.Steps) motion.Options {
	dr := d.Drive
	lo, hi := d.SoftLimits()
	o := motion.Options{
		Min: lo, Max: hi, MaxSpeed: dr.MaxSpeed, Accel: dr.Accel,
		Settle:   dr.Settle(),
		Poll:     axisPoll,
		Backlash: nominal, Approach: motion.Up, ApproachMargin: approachMarginSteps,
		SlipWhenReleased: dr.SlipOnRelease,
	}
	if h := dr.Home; h != nil {
		at := h.AtTurns * d.StepsPerTurn()
		// slow enough that the ramped stop after the switch trips stays well clear of the
		// end stop behind it: the ramp from v stops within v²/(2·accel)
		fast := math.Min(dr.MaxSpeed/2, math.Sqrt(dr.Accel*math.Max(at, homingMinRunSteps)/2))
		o.Homing = motion.HomingOptions{
			Dir: motion.Down, FastSpeed: fast, SlowSpeed: math.Min(homingSlowSpeed, fast),
			BackOff: motion.Steps(math.Max(homingBackOffHysteresisFactor*h.HysteresisSteps,
				homingBackOffPlayFactor*float64(nominal)) + homingBackOffMarginSteps),
			// moving down onto the switch the shaft leads the motor by half the play
			HomePosition: motion.Steps(math.Round(at - d.ShaftLag())),
		}
	}
	return o
}

// TunerOptions fills in, over base, what the description says about the station: whether there
// is a home switch, whether the capacitor has hard stops, and the nominal play.
func (d Description) TunerOptions(base tune.Options, nominal motion.Steps) tune.Options {
	base.HasHome = d.Drive.Home != nil
	base.HardStops = d.HardStops()
	base.NominalBacklash = nominal
	return base
}

// LawBend is how far, in steps, the capacitor's true law may stray from a smooth model fitted
// to it (straightLawBend, tableLawBend of the travel). It is the memory map's Bend.
func (d Description) LawBend() float64 {
	share := straightLawBend
	if len(d.Capacitor.Table) > 0 {
		share = tableLawBend
	}
	return share * d.Capacitor.SpanTurns * d.StepsPerTurn()
}

// MapOptions are the memory map's options for this station: the physics prior (with the
// description's tolerance, at the site's mean temperature) and the capacitor law's bend.
func (d Description) MapOptions() (memmap.Options, error) {
	p, err := d.Prior(d.Site.MeanC)
	if err != nil {
		return memmap.Options{}, err
	}
	return memmap.Options{Prior: p, Bend: d.LawBend()}, nil
}
