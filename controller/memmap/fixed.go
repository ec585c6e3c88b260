package memmap

import (
	"errors"
	"math"
	"strconv"
	"strings"
	"time"

	"periph.io/x/conn/v3/physic"
)

// Frequencies and temperatures are written as exact decimals of their integer units (µHz and
// nK), so that a value read back is the value written, with no float rounding in between.

var errSyntax = errors.New("not a decimal number")

// appendFixed appends v/10^dec as a decimal with trailing fractional zeros trimmed.
func appendFixed(b []byte, v int64, dec int) []byte {
	u := uint64(v)
	if v < 0 {
		b = append(b, '-')
		u = uint64(-v) // also right for math.MinInt64, by two's complement
	}
	var p uint64 = 1
	for range dec {
		p *= 10
	}
	b = strconv.AppendUint(b, u/p, 10)
	frac := u % p
	if frac == 0 {
		return b
	}
	digits := make([]byte, dec)
	for i := dec - 1; i >= 0; i-- {
		digits[i] = byte('0' + frac%10)
		frac /= 10
	}
	return append(append(b, '.'), strings.TrimRight(string(digits), "0")...)
}

// parseFixed reads a decimal [-+]digits[.digits] with at most dec fractional digits as an
// integer count of 10^-dec units.
func parseFixed(s string, dec int) (int64, error) {
	neg := false
	if s != "" && (s[0] == '-' || s[0] == '+') {
		neg = s[0] == '-'
		s = s[1:]
	}
	ip, fp, _ := strings.Cut(s, ".")
	if ip == "" && fp == "" {
		return 0, errSyntax
	}
	for _, part := range [2]string{ip, fp} {
		for i := 0; i < len(part); i++ {
			if part[i] < '0' || part[i] > '9' {
				return 0, errSyntax
			}
		}
	}
	if len(fp) > dec {
		return 0, errors.New("more than " + strconv.Itoa(dec) + " decimals")
	}
	var v uint64
	add := func(c byte) error {
		d := uint64(c - '0')
		if v > (math.MaxInt64-d)/10 {
			return strconv.ErrRange
		}
		v = v*10 + d
		return nil
	}
	for i := 0; i < len(ip); i++ {
		if err := add(ip[i]); err != nil {
			return 0, err
		}
	}
	for i := 0; i < dec; i++ {
		c := byte('0')
		if i < len(fp) {
			c = fp[i]
		}
		if err := add(c); err != nil {
			return 0, err
		}
	}
	if neg {
		return -int64(v), nil
	}
	return int64(v), nil
}

// microPerHz is the number of physic.Frequency units in a hertz.
const microPerHz = 6

func appendHz(b []byte, f physic.Frequency) []byte { return appendFixed(b, int64(f), microPerHz) }

// parseHz reads a frequency in hertz. Besides plain decimals it accepts the exponent notation
// spreadsheets like to write ("7.074E+06"), rounded to the microhertz.
func parseHz(s string) (physic.Frequency, error) {
	v, err := parseFixed(s, microPerHz)
	if err == nil {
		return physic.Frequency(v), nil
	}
	if !errors.Is(err, errSyntax) {
		return 0, err
	}
	x, ferr := strconv.ParseFloat(s, 64)
	if ferr != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return 0, errSyntax
	}
	x = math.Round(x * 1e6)
	if math.Abs(x) >= math.MaxInt64/2 {
		return 0, strconv.ErrRange
	}
	return physic.Frequency(x), nil
}

// nanoPerKelvin is the number of physic.Temperature units in a kelvin.
const nanoPerKelvin = 9

func appendCelsius(b []byte, t physic.Temperature) []byte {
	return appendFixed(b, int64(t-physic.ZeroCelsius), nanoPerKelvin)
}

func parseCelsius(s string) (physic.Temperature, error) {
	v, err := parseFixed(s, nanoPerKelvin)
	if err != nil {
		x, ferr := strconv.ParseFloat(s, 64)
		if !errors.Is(err, errSyntax) || ferr != nil || math.IsNaN(x) || math.IsInf(x, 0) ||
			math.Abs(x) > 1e9 {
			return 0, err
		}
		v = int64(math.Round(x * 1e9))
	}
	if v > math.MaxInt64-int64(physic.ZeroCelsius) {
		return 0, strconv.ErrRange
	}
	return physic.Temperature(v) + physic.ZeroCelsius, nil
}

func appendFloat(b []byte, v float64) []byte { return strconv.AppendFloat(b, v, 'g', -1, 64) }

// parseFinite reads a float64 that must be a finite number.
func parseFinite(s string) (float64, error) {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, errSyntax
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, errors.New("not a finite number")
	}
	return v, nil
}

func appendTime(b []byte, t time.Time) []byte {
	return t.UTC().AppendFormat(b, time.RFC3339Nano)
}

func parseTime(s string) (time.Time, error) {
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, errors.New("not an RFC 3339 time")
	}
	return t.UTC(), nil
}
