package main

import (
	"math"

	"periph.io/x/conn/v3/physic"
)

func hz(f float64) physic.Frequency   { return physic.Frequency(math.Round(f * float64(physic.Hertz))) }
func hzOf(f physic.Frequency) float64 { return float64(f) / float64(physic.Hertz) }
