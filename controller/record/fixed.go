package record

import (
	"errors"
	"math"
	"strconv"
	"strings"
)

// Decimal places of the fixed-point columns: the resolution of the unit types they carry.
const (
	secondScale = 9 // time.Duration counts nanoseconds
	hertzScale  = 6 // physic.Frequency counts microhertz
	wattScale   = 9 // physic.Power counts nanowatts
)

var (
	errFixed = errors.New("want an unsigned decimal such as 12 or 0.25")
	errRange = errors.New("too large")
)

// parseFixed parses an unsigned decimal ("12", "0.25") into a count of 10^-scale units. Decimals
// beyond scale are rounded half up, so that files from tools that print more digits still read.
func parseFixed(s string, scale int) (int64, error) {
	intPart, frac, dot := strings.Cut(s, ".")
	if intPart == "" || dot && frac == "" || !digits(intPart) || !digits(frac) {
		return 0, errFixed
	}
	var v int64
	add := func(d byte) bool {
		n := int64(d - '0')
		if v > (math.MaxInt64-n)/10 {
			return false
		}
		v = v*10 + n
		return true
	}
	for i := 0; i < len(intPart); i++ {
		if !add(intPart[i]) {
			return 0, errRange
		}
	}
	for i := 0; i < scale; i++ {
		d := byte('0')
		if i < len(frac) {
			d = frac[i]
		}
		if !add(d) {
			return 0, errRange
		}
	}
	if len(frac) > scale && frac[scale] >= '5' {
		if v == math.MaxInt64 {
			return 0, errRange
		}
		v++
	}
	return v, nil
}

// appendFixed appends v (>= 0) counted in 10^-scale units as a decimal with at least minDec and
// at most scale decimals: trailing zeros beyond minDec are dropped, nothing is rounded.
func appendFixed(b []byte, v int64, scale, minDec int) []byte {
	unit := int64(1)
	for range scale {
		unit *= 10
	}
	b = strconv.AppendInt(b, v/unit, 10)
	frac := v % unit
	n := scale // decimals to keep
	for t := frac; n > minDec && t%10 == 0; t /= 10 {
		n--
	}
	if n == 0 {
		return b
	}
	b = append(b, '.')
	mark := len(b)
	b = strconv.AppendInt(b, unit+frac, 10) // a leading 1 then exactly scale digits
	copy(b[mark:], b[mark+1:])
	return b[:mark+n]
}

func digits(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] < '0' || s[i] > '9' {
			return false
		}
	}
	return true
}
