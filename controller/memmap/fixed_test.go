package memmap

import (
	"errors"
	"strconv"
	"testing"

	"periph.io/x/conn/v3/physic"
)

func TestParseFixed(t *testing.T) {
	for _, tc := range []struct {
		in   string
		dec  int
		want int64
		bad  bool
	}{
		{"0", 6, 0, false},
		{"7074000", 6, 7074000000000, false},
		{"7074000.000001", 6, 7074000000001, false},
		{"-1.5", 3, -1500, false},
		{"+.25", 2, 25, false},
		{"3.", 1, 30, false},
		{"1.0000001", 6, 0, true},
		{"", 6, 0, true},
		{".", 6, 0, true},
		{"-", 6, 0, true},
		{"1e6", 6, 0, true},
		{"12a", 6, 0, true},
		{"9223372036854.775807", 6, 9223372036854775807, false},
		{"9223372036854.775808", 6, 0, true},
	} {
		got, err := parseFixed(tc.in, tc.dec)
		if tc.bad != (err != nil) || !tc.bad && got != tc.want {
			t.Errorf("parseFixed(%q, %d) = %d, %v; want %d, bad %v", tc.in, tc.dec, got, err, tc.want, tc.bad)
		}
	}
	if _, err := parseHz("1e400"); err == nil {
		t.Error("parseHz took 1e400")
	}
	if f, err := parseHz("7.074E+06"); err != nil || f != 7074*physic.KiloHertz {
		t.Errorf("parseHz(7.074E+06) = %v, %v", f, err)
	}
	if c, err := parseCelsius("-273.15"); err != nil || c != 0 {
		t.Errorf("parseCelsius(-273.15) = %d, %v; want 0 K", c, err)
	}
	if _, err := parseFixed("99999999999999999999", 0); !errors.Is(err, strconv.ErrRange) {
		t.Errorf("overflow gives %v", err)
	}
}

func FuzzFixedRoundTrip(f *testing.F) {
	f.Add(int64(0), 6)
	f.Add(int64(-9223372036854775808), 6)
	f.Add(int64(7074000000001), 6)
	f.Add(int64(-1), 9)
	f.Fuzz(func(t *testing.T, v int64, dec int) {
		dec = ((dec % 10) + 10) % 10
		s := string(appendFixed(nil, v, dec))
		got, err := parseFixed(s, dec)
		if v == -9223372036854775808 {
			return // its magnitude has no positive int64; parseFixed reports the range
		}
		if err != nil || got != v {
			t.Fatalf("appendFixed(%d, %d) = %q, parsed back as %d, %v", v, dec, s, got, err)
		}
	})
}
