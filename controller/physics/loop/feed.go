package loop

import (
	"errors"
	"fmt"
	"math"
)

// Feed is a coupling-loop style match between the line and the loop. At DesignFrequency it
// transforms the resonant loop to exactly the line impedance; elsewhere the transformed
// resistance misses it by a factor r(f) = (f/f_d)^e with e = log₂(OctaveSWR), so that the best
// SWR reachable by tuning is OctaveSWR one octave away and rises slowly towards band edges, as
// a fixed coupling loop does.
type Feed struct {
	DesignFrequency float64 // Hz
	OctaveSWR       float64 // best SWR one octave from DesignFrequency, ≥ 1
}

// Validate reports every problem with the feed at once. Every comparison is written so that
// NaN and the infinities fail it.
func (fd Feed) Validate() error {
	var errs []error
	if !(fd.DesignFrequency > 0) || math.IsInf(fd.DesignFrequency, 1) {
		errs = append(errs, fmt.Errorf("feed design frequency %g Hz: want more than 0 and finite", fd.DesignFrequency))
	}
	if !(fd.OctaveSWR >= 1 && fd.OctaveSWR <= 10) {
		errs = append(errs, fmt.Errorf("feed octave SWR %g: want 1 to 10", fd.OctaveSWR))
	}
	return errors.Join(errs...)
}

// Ratio is r(f): the resonant input resistance over the line impedance.
func (fd Feed) Ratio(f float64) float64 {
	return math.Pow(f/fd.DesignFrequency, math.Log2(fd.OctaveSWR))
}

// BestSWR is the lowest SWR that tuning can reach at f.
func (fd Feed) BestSWR(f float64) float64 {
	r := fd.Ratio(f)
	return math.Max(r, 1/r)
}

// Gamma is the reflection coefficient seen on the line for a loop whose series reactance over
// series resistance is y = X/R (0 at resonance), with resistance ratio r. Through the coupling
// transformer the loop appears as the normalised impedance z = r/(1 + j·y), so
// Γ = (z − 1)/(z + 1) = (r − 1 − j·y)/(r + 1 + j·y).
func Gamma(r, y float64) complex128 {
	return complex(r-1, -y) / complex(r+1, y)
}

// Gamma2 is |Γ|² for Gamma(r, y), without complex arithmetic.
func Gamma2(r, y float64) float64 {
	return ((r-1)*(r-1) + y*y) / ((r+1)*(r+1) + y*y)
}

// SWR converts |Γ|² to the standing-wave ratio.
func SWR(gamma2 float64) float64 {
	g := math.Sqrt(gamma2)
	if g >= 1 {
		return math.Inf(1)
	}
	return (1 + g) / (1 - g)
}

// ReturnLoss is −20·log₁₀|Γ| in dB (positive; +Inf for a perfect match).
func ReturnLoss(gamma2 float64) float64 { return -10 * math.Log10(gamma2) }
