// Package band knows the amateur bands a small transmitting loop is built for, so that the
// controller can tell a band change (retune from the memory map at once) from a move within a
// band, the design calculator can check a capacitor's coverage, and the simulated radio knows
// where it may transmit. It is the one table of the bands in tankd.
//
// Edges are the widest of the three ITU regions' allocations (from memory of the ITU Radio
// Regulations' table of allocations; 60 m is the worldwide secondary allocation of WRC-15); a
// station's licence may allow less, and the operator's own limits always win.
package band

import (
	"fmt"
	"strings"

	"periph.io/x/conn/v3/physic"
)

// Band is a named amateur band.
type Band struct {
	Name      string // e.g. "80m"
	Low, High physic.Frequency
}

// Contains reports whether f lies within the band's edges.
func (b Band) Contains(f physic.Frequency) bool { return f >= b.Low && f <= b.High }

// Centre is the band's middle frequency.
func (b Band) Centre() physic.Frequency { return (b.Low + b.High) / 2 }

func khz(k int64) physic.Frequency { return physic.Frequency(k) * physic.KiloHertz }

func hz(h int64) physic.Frequency { return physic.Frequency(h) * physic.Hertz }

// all lists the HF bands, lowest first (the low bands are where a loop's bandwidth is tightest).
var all = [...]Band{
	{"160m", khz(1800), khz(2000)},
	{"80m", khz(3500), khz(4000)},
	{"60m", hz(5351500), hz(5366500)},
	{"40m", khz(7000), khz(7300)},
	{"30m", khz(10100), khz(10150)},
	{"20m", khz(14000), khz(14350)},
	{"17m", khz(18068), khz(18168)},
	{"15m", khz(21000), khz(21450)},
	{"12m", khz(24890), khz(24990)},
	{"10m", khz(28000), khz(29700)},
}

// All returns the bands, lowest first: a fresh slice each call, so callers may edit it.
func All() []Band { return append([]Band(nil), all[:]...) }

// Of returns the band that contains f.
func Of(f physic.Frequency) (Band, bool) {
	for _, b := range all {
		if b.Contains(f) {
			return b, true
		}
	}
	return Band{}, false
}

// Named returns the band called name ("80m", "80 m" and "80M" all work).
func Named(name string) (Band, error) {
	n := strings.ToLower(strings.ReplaceAll(strings.TrimSpace(name), " ", ""))
	for _, b := range all {
		if b.Name == n {
			return b, nil
		}
	}
	names := make([]string, len(all))
	for i, b := range all {
		names[i] = b.Name
	}
	return Band{}, fmt.Errorf("band %q: want one of %s", name, strings.Join(names, ", "))
}
