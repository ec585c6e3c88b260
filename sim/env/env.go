// Package env is the loop's surroundings: the air temperature over the day. The loop's copper
// expands with it (moving the resonance) and the capacitor drifts with it, so a tune that was
// right at dawn is off by the afternoon.
//
// Temperature is a pure function of time (a daily swing plus a seeded slow wander), so any
// component can ask for it at any instant and every run with the same seed sees the same
// weather.
package env

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"
)

// Options describe the weather.
type Options struct {
	Mean     float64 // daily mean, °C
	Swing    float64 // half the daily peak-to-peak swing, K
	PeakHour float64 // hour of day (UTC, 0–24) of the warmest point
	Wander   float64 // amplitude of slow irregular change on top, K
	Seed     uint64
}

// Validate reports every problem with o at once. Every comparison is written so that NaN and
// the infinities fail it.
func (o Options) Validate() error {
	var errs []error
	// −50 to 60 °C spans the coldest and hottest places loops are put up (from memory).
	if !(o.Mean >= -50 && o.Mean <= 60) {
		errs = append(errs, fmt.Errorf("environment: mean %g °C: want −50 to 60", o.Mean))
	}
	if !(o.Swing >= 0 && o.Swing <= 30) {
		errs = append(errs, fmt.Errorf("environment: swing %g K: want 0 to 30", o.Swing))
	}
	if !(o.Wander >= 0 && o.Wander <= 20) {
		errs = append(errs, fmt.Errorf("environment: wander %g K: want 0 to 20", o.Wander))
	}
	if !(o.PeakHour >= 0 && o.PeakHour <= 24) {
		errs = append(errs, fmt.Errorf("environment: peak hour %g: want 0 to 24", o.PeakHour))
	}
	return errors.Join(errs...)
}

// Weather gives the temperature at any time.
type Weather struct {
	opts   Options
	phases [3]float64
}

// wander periods: irregular enough, all within a day
var wanderPeriods = [3]float64{2.7, 5.3, 11.1} // hours

// New returns the weather.
func New(o Options) (*Weather, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	w := &Weather{opts: o}
	r := rand.New(rand.NewPCG(o.Seed, 0x656e76))
	for i := range w.phases {
		w.phases[i] = r.Float64() * 2 * math.Pi
	}
	return w, nil
}

// Constant is weather that never changes.
func Constant(c float64) *Weather { return &Weather{opts: Options{Mean: c}} }

// Temperature is the air temperature at t, °C.
func (w *Weather) Temperature(t time.Time) float64 {
	o := w.opts
	h := float64(t.Hour()) + float64(t.Minute())/60 + float64(t.Second())/3600 + float64(t.Nanosecond())/3.6e12
	v := o.Mean + o.Swing*math.Cos(2*math.Pi*(h-o.PeakHour)/24)
	if o.Wander > 0 {
		hours := float64(t.Unix()) / 3600
		for i, p := range wanderPeriods {
			v += o.Wander / 3 * math.Sin(2*math.Pi*hours/p+w.phases[i])
		}
	}
	return v
}
