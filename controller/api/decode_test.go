package api

import (
	"errors"
	"net/http"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

func TestDecodeFreqBody(t *testing.T) {
	for _, c := range []struct {
		body     string
		required bool
		want     physic.Frequency
		ok       bool
		code     int
		field    string
	}{
		{`{"hz": 3750000}`, true, 3750 * physic.KiloHertz, true, 0, ""},
		{` {"hz":3750000.25} `, true, 3750*physic.KiloHertz + physic.Hertz/4, true, 0, ""},
		{`{"hz": 3.75e6}`, true, 3750 * physic.KiloHertz, true, 0, ""},
		{`{"hz": 0.000001}`, true, physic.MicroHertz, true, 0, ""},
		{`{"hz": 1e9}`, true, physic.GigaHertz, true, 0, ""}, // maxHz, the bound itself
		{``, false, 0, false, 0, ""},
		{`{}`, false, 0, false, 0, ""},
		{`{"hz": null}`, false, 0, false, 0, ""},
		{``, true, 0, false, 422, "hz"},
		{`{"hz": 1000000001}`, true, 0, false, 422, "hz"},
		{`{"hz": 0.0000001}`, true, 0, false, 422, "hz"},
		{`{"hz": -1}`, true, 0, false, 422, "hz"},
		{`{"hz": "1"}`, true, 0, false, 400, "hz"},
		{`{"hz": {}}`, true, 0, false, 400, "hz"},
		{`{"hz": 1, "hz2": 2}`, true, 0, false, 400, "hz2"},
		{`{"hz": 1,}`, true, 0, false, 400, ""},
		{`null`, true, 0, false, 400, ""},
		{`{"hz": 1}x`, true, 0, false, 400, ""},
		{"\xff", true, 0, false, 400, ""},
	} {
		f, ok, err := decodeFreqBody([]byte(c.body), c.required)
		if c.code == 0 {
			if err != nil || f != c.want || ok != c.ok {
				t.Errorf("%q: %v, %v, %v; want %v, %v", c.body, f, ok, err, c.want, c.ok)
			}
			continue
		}
		var ae *apiError
		if !errors.As(err, &ae) || ae.Status != c.code || ae.Field != c.field {
			t.Errorf("%q: %v; want a %d naming %q", c.body, err, c.code, c.field)
		}
	}
}

func TestDecodeStepBody(t *testing.T) {
	for _, c := range []struct {
		body  string
		want  motion.Steps
		code  int
		field string
	}{
		{`{"step": 30000}`, 30000, 0, ""},
		{`{"step": -5}`, -5, 0, ""},
		{`{"step": 0}`, 0, 0, ""},
		{`{}`, 0, 422, "step"},
		{`{"step": 1.5}`, 0, 422, "step"},
		{`{"step": 1e3}`, 0, 422, "step"},
		{`{"step": 9223372036854775808}`, 0, 422, "step"},
		{`{"step": "1"}`, 0, 400, "step"},
		{`{"step": 1, "hz": 2}`, 0, 400, "hz"},
	} {
		got, err := decodeStepBody([]byte(c.body))
		if c.code == 0 {
			if err != nil || got != c.want {
				t.Errorf("%q: %d, %v; want %d", c.body, got, err, c.want)
			}
			continue
		}
		var ae *apiError
		if !errors.As(err, &ae) || ae.Status != c.code || ae.Field != c.field {
			t.Errorf("%q: %v; want a %d naming %q", c.body, err, c.code, c.field)
		}
	}
}

func TestParseParameters(t *testing.T) {
	for _, c := range []struct {
		s    string
		want physic.Frequency
		code int
	}{
		{"3750000", 3750 * physic.KiloHertz, 0},
		{"3750000.000001", 3750*physic.KiloHertz + physic.MicroHertz, 0},
		{"0", 0, 422},
		{"", 0, 400},
		{"-1", 0, 400},
		{"+1", 0, 400},
		{"1e6", 0, 400},
		{"0x10", 0, 400},
		{"1.", 0, 400},
		{".5", 0, 400},
		{"Inf", 0, 400},
		{"99999999999", 0, 422},
	} {
		got, err := parseHzPath(c.s)
		if c.code == 0 && (err != nil || got != c.want) || c.code != 0 && !isStatus(err, c.code) {
			t.Errorf("parseHzPath(%q): %v, %v; want %v (status %d)", c.s, got, err, c.want, c.code)
		}
	}
	for _, c := range []struct {
		s    string
		want time.Duration
		code int
	}{
		{"", 0, 0}, {"5s", 5 * time.Second, 0}, {"1500ms", 1500 * time.Millisecond, 0}, {"20", 20 * time.Second, 0},
		{"21s", 0, 422}, {"0", 0, 422}, {"-1s", 0, 422}, {"soon", 0, 400}, {"5 s", 0, 400},
	} {
		got, err := parseWait(c.s)
		if c.code == 0 && (err != nil || got != c.want) || c.code != 0 && !isStatus(err, c.code) {
			t.Errorf("parseWait(%q): %v, %v; want %v (status %d)", c.s, got, err, c.want, c.code)
		}
	}
	if id, err := parseRequestID("42"); err != nil || id != 42 {
		t.Errorf("parseRequestID(42): %d, %v", id, err)
	}
	for _, s := range []string{"0", "", "x", "-3", "18446744073709551616"} {
		if _, err := parseRequestID(s); !isStatus(err, http.StatusBadRequest) {
			t.Errorf("parseRequestID(%q): %v, want a 400", s, err)
		}
	}
	if n, err := parseSeq(" 17 ", "since"); err != nil || n != 17 {
		t.Errorf("parseSeq(17): %d, %v", n, err)
	}
}

// hz writes every frequency exactly, so that what the API sends reads back the same.
func TestHzRoundTrip(t *testing.T) {
	for _, f := range []physic.Frequency{1, 999999, physic.Hertz, 3750*physic.KiloHertz + 1, 7*physic.MegaHertz + physic.Hertz/2, physic.GigaHertz} {
		got, ok, err := decodeFreqBody([]byte(`{"hz": `+string(hz(f))+`}`), true)
		if err != nil || !ok || got != f {
			t.Errorf("%d µHz written as %s, read back as %d (%v)", int64(f), hz(f), int64(got), err)
		}
	}
	if got := hz(-physic.Hertz / 2); got != "-0.5" {
		t.Errorf("hz(-0.5 Hz) = %s", got)
	}
}

func isStatus(err error, code int) bool {
	var ae *apiError
	return errors.As(err, &ae) && ae.Status == code && ae.Message != ""
}

// FuzzDecodeRequests feeds one input to every decoder: none may panic, every failure is a 400
// or a 422 with a message, and every success holds what the handlers rely on.
func FuzzDecodeRequests(f *testing.F) {
	for _, s := range []string{
		``, `{}`, `{"hz": 3750000}`, `{"hz": 3.75e6}`, `{"hz": -1}`, `{"hz": "3750000"}`, `{"step": 30000}`, `{"step": 1.5}`,
		`{"points": []}`, `{"points": [{"frequency_hz": 3750000, "position": 46012, "time": "2026-01-01T10:00:00Z", "temperature_c": 15.5, "swr": 1.08, "q": 410}]}`,
		`{"points": [{"frequency_hz": 1, "position": 2, "colour": 3}]}`, `{"points": [null]}`, `{"points": null}`,
		`[1,2]`, `null`, `{"hz": 1e999}`, `{"hz": 1}{"hz": 2}`, "3750000", "3750000.5", "5s", "17", "\xff\xfe",
		strings.Repeat(`{"a":`, 100),
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		check := func(what string, err error) {
			if err == nil {
				return
			}
			var ae *apiError
			if !errors.As(err, &ae) || (ae.Status != 400 && ae.Status != 422) || ae.Message == "" {
				t.Fatalf("%s(%q): %v (%#v), want a 400 or 422 with a message", what, b, err, ae)
			}
		}
		fr, ok, err := decodeFreqBody(b, false)
		check("decodeFreqBody", err)
		if err == nil && ok {
			if fr <= 0 || fr > physic.GigaHertz {
				t.Fatalf("decodeFreqBody(%q) = %v, outside (0, 1 GHz]", b, fr)
			}
			if back, _, err := decodeFreqBody([]byte(`{"hz":`+string(hz(fr))+`}`), true); err != nil || back != fr {
				t.Fatalf("%v written as %s reads back as %v (%v)", fr, hz(fr), back, err)
			}
		}
		_, err = decodeStepBody(b)
		check("decodeStepBody", err)
		check("decodeEmptyBody", decodeEmptyBody(b))
		pts, err := decodePoints(b)
		check("decodePoints", err)
		for _, p := range pts {
			if p.Freq <= 0 || p.HasTemp && p.Temp < 0 {
				t.Fatalf("decodePoints(%q) gave %+v", b, p)
			}
		}
		s := string(b)
		if fr, err := parseHzPath(s); err == nil && (fr <= 0 || fr > physic.GigaHertz) {
			t.Fatalf("parseHzPath(%q) = %v", s, fr)
		} else {
			check("parseHzPath", err)
		}
		if d, err := parseWait(s); err == nil && (d < 0 || d > maxWait) {
			t.Fatalf("parseWait(%q) = %v", s, d)
		} else {
			check("parseWait", err)
		}
		_, err = parseSeq(s, "since")
		check("parseSeq", err)
		if id, err := parseRequestID(s); err == nil && id == 0 {
			t.Fatalf("parseRequestID(%q) = 0", s)
		} else {
			check("parseRequestID", err)
		}
	})
}
