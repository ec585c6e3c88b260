package main

import (
	"math"
	"time"

	"periph.io/x/conn/v3/physic"
)

func hz(f float64) physic.Frequency { return physic.Frequency(math.Round(f * float64(physic.Hertz))) }

// time30m is a random pause of 5 to 60 minutes between warm-up tunes.
func time30m(r interface{ IntN(int) int }) time.Duration {
	return time.Duration(5+r.IntN(55)) * time.Minute
}
