package sense

import (
	"context"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"
)

// Reading is one calibrated sample of the directional coupler: forward and reflected power on
// the feed line, and when it was taken: the middle of the reflected channel's conversion, since
// the reflected power is what changes across a dip (the forward power hardly changes as the
// capacitor turns), so that is the instant a reading taken on the move describes.
type Reading struct {
	At        time.Time
	Forward   physic.Power
	Reflected physic.Power
}

// Sensor samples the coupler. Read blocks (on the controller's clock) for the conversion and any
// averaging the sensor does itself.
type Sensor interface {
	Read(ctx context.Context) (Reading, error)
}

// Gamma2 returns |Γ|², the reflected share of the forward power, clamped to [0, 1]. It is NaN
// when there is no forward power to compare with.
func (r Reading) Gamma2() float64 {
	if r.Forward <= 0 {
		return math.NaN()
	}
	g := float64(r.Reflected) / float64(r.Forward)
	return math.Min(math.Max(g, 0), 1)
}

// SWR returns the standing-wave ratio (1+|Γ|)/(1−|Γ|). It is +Inf at total reflection and NaN
// without forward power.
func (r Reading) SWR() float64 { return SWRFromGamma2(r.Gamma2()) }

// SWRFromGamma2 converts |Γ|² to SWR.
func SWRFromGamma2(g2 float64) float64 {
	if math.IsNaN(g2) {
		return g2
	}
	g := math.Sqrt(math.Min(math.Max(g2, 0), 1))
	if g >= 1 {
		return math.Inf(1)
	}
	return (1 + g) / (1 - g)
}

// Gamma2FromSWR converts an SWR (≥ 1) to |Γ|².
func Gamma2FromSWR(swr float64) float64 {
	if swr <= 1 {
		return 0
	}
	if math.IsInf(swr, 1) {
		return 1
	}
	g := (swr - 1) / (swr + 1)
	return g * g
}
