package statedir

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/store"
)

func sameMarker(a, b Marker) bool {
	return a.Position == b.Position && a.Trusted == b.Trusted && a.At.Equal(b.At) && a.Reason == b.Reason
}

// stopAt is the stop time the marker tests use; any fixed instant would do.
var stopAt = time.Date(2026, 1, 2, 15, 4, 5, 123456789, time.UTC)

const header = "tankd-clean-stop 1\n"

func TestParseMarker(t *testing.T) {
	data := "position=-1234 trusted=true at=2026-01-02T15:04:05.123456789Z\n"
	want := Marker{Position: -1234, Trusted: true, At: stopAt}
	withReason := func(r string) Marker { m := want; m.Reason = r; return m }
	for _, tc := range []struct {
		name, body string
		want       Marker
		err        error // nil: want
	}{
		{"no reason", header + data, want, nil},
		{"a reason", header + data + `reason="SIGTERM"` + "\n", withReason("SIGTERM"), nil},
		{"an empty reason", header + data + `reason=""` + "\n", want, nil},
		{"a reason with escapes", header + data + `reason="two\nlines, \"quoted\", \u00b5 and \x00"` + "\n",
			withReason("two\nlines, \"quoted\", µ and \x00"), nil},
		{"fields in another order", header + "at=2026-01-02T15:04:05.123456789Z trusted=true position=-1234\n", want, nil},
		{"untrusted", header + "position=7 trusted=false at=2026-01-02T15:04:05.123456789Z\n",
			Marker{Position: 7, At: stopAt}, nil},
		// The int64 limits: Go spec, numeric types.
		{"largest position", header + "position=9223372036854775807 trusted=true at=2026-01-02T15:04:05.123456789Z\n",
			Marker{Position: math.MaxInt64, Trusted: true, At: stopAt}, nil},
		{"smallest position", header + "position=-9223372036854775808 trusted=true at=2026-01-02T15:04:05.123456789Z\n",
			Marker{Position: math.MinInt64, Trusted: true, At: stopAt}, nil},
		// 16:04:05 at +01:00 is 15:04:05 UTC: RFC 3339, section 4.2.
		{"a time with an offset", header + "position=-1234 trusted=true at=2026-01-02T16:04:05.123456789+01:00\n", want, nil},

		{"empty", "", Marker{}, ErrMarkerFormat},
		{"no final newline", header + strings.TrimSuffix(data, "\n"), Marker{}, ErrMarkerFormat},
		{"another file", "tankd-calibration 1\n" + data, Marker{}, ErrMarkerFormat},
		{"no version", "tankd-clean-stop\n" + data, Marker{}, ErrMarkerFormat},
		{"version not a number", "tankd-clean-stop one\n" + data, Marker{}, ErrMarkerFormat},
		{"version 0", "tankd-clean-stop 0\n" + data, Marker{}, ErrMarkerFormat},
		{"header alone", header, Marker{}, ErrMarkerFormat},
		{"a line too many", header + data + `reason="x"` + "\n" + "more\n", Marker{}, ErrMarkerFormat},
		{"CRLF", strings.ReplaceAll(header+data, "\n", "\r\n"), Marker{}, ErrMarkerFormat},
		{"position missing", header + "trusted=true at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"trusted missing", header + "position=1 at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"at missing", header + "position=1 trusted=true\n", Marker{}, ErrMarkerFormat},
		{"a field twice", header + "position=1 position=2 trusted=true at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"an unknown field", header + "position=1 trusted=true at=2026-01-02T15:04:05Z speed=3\n", Marker{}, ErrMarkerFormat},
		{"two spaces", header + "position=1  trusted=true at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"a fractional position", header + "position=1.5 trusted=true at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"a position past int64", header + "position=9223372036854775808 trusted=true at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"trusted yes", header + "position=1 trusted=yes at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"trusted 1", header + "position=1 trusted=1 at=2026-01-02T15:04:05Z\n", Marker{}, ErrMarkerFormat},
		{"at not a time", header + "position=1 trusted=true at=yesterday\n", Marker{}, ErrMarkerFormat},
		{"at without a zone", header + "position=1 trusted=true at=2026-01-02T15:04:05\n", Marker{}, ErrMarkerFormat},
		{"at before the year 0 in UTC", header + "position=1 trusted=true at=0000-01-01T00:30:00+01:00\n", Marker{}, ErrMarkerFormat},
		{"reason unquoted", header + data + "reason=SIGTERM\n", Marker{}, ErrMarkerFormat},
		{"reason in back quotes", header + data + "reason=`SIGTERM`\n", Marker{}, ErrMarkerFormat},
		{"reason with a tail", header + data + `reason="SIGTERM" x` + "\n", Marker{}, ErrMarkerFormat},
		{"another third line", header + data + "why=SIGTERM\n", Marker{}, ErrMarkerFormat},
		{"reason too long", header + data + `reason="` + strings.Repeat("x", MaxReasonLen+1) + `"` + "\n", Marker{}, ErrMarkerFormat},

		{"a newer version", "tankd-clean-stop 2\nwhatever version 2 holds\n", Marker{}, ErrMarkerVersion},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParseMarker([]byte(tc.body))
			switch {
			case tc.err == nil && err != nil:
				t.Fatalf("ParseMarker = %v", err)
			case tc.err == nil && !sameMarker(got, tc.want):
				t.Fatalf("ParseMarker = %+v, want %+v", got, tc.want)
			case tc.err != nil && (!errors.Is(err, tc.err) || !sameMarker(got, Marker{})):
				t.Fatalf("ParseMarker = %+v, %v; want the zero Marker and %v", got, err, tc.err)
			}
			// store.Decode falls back from a damaged file, never from one of another version.
			if errors.Is(err, store.ErrCorrupt) != (tc.err == ErrMarkerFormat) {
				t.Fatalf("ParseMarker error %v: store.ErrCorrupt %v, want %v", err, errors.Is(err, store.ErrCorrupt), tc.err == ErrMarkerFormat)
			}
		})
	}
}

func TestMarkerRoundTrip(t *testing.T) {
	for _, m := range []Marker{
		{},
		{Position: -1234, Trusted: true, At: stopAt},
		{Position: 99, At: stopAt.In(time.FixedZone("UTC-5", -5*3600)), Reason: "SIGTERM"},
		{Position: math.MinInt64, At: time.Date(9999, 12, 31, 23, 59, 59, 999999999, time.UTC), Reason: "\"\n\t\xff"},
		{Position: math.MaxInt64, Trusted: true, At: time.Date(0, 1, 1, 0, 0, 0, 0, time.UTC), Reason: strings.Repeat("µ", MaxReasonLen/2)},
	} {
		body, err := encodeMarker(m)
		if err != nil {
			t.Fatalf("encode %+v: %v", m, err)
		}
		got, err := ParseMarker(body)
		if err != nil || !sameMarker(got, m) {
			t.Fatalf("%+v encoded as %q parses as %+v, %v", m, body, got, err)
		}
		if got.At.Location() != time.UTC {
			t.Fatalf("ParseMarker returned a time in %v, want UTC", got.At.Location())
		}
	}
	// The file as the package doc shows it.
	body, err := encodeMarker(Marker{Position: -1234, Trusted: true, At: stopAt, Reason: "SIGTERM"})
	if want := header + "position=-1234 trusted=true at=2026-01-02T15:04:05.123456789Z\nreason=\"SIGTERM\"\n"; err != nil || string(body) != want {
		t.Fatalf("encodeMarker = %q, %v; want %q", body, err, want)
	}
}

func TestEncodeMarkerRefuses(t *testing.T) {
	for _, m := range []Marker{
		{At: time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC)},
		{At: time.Date(-1, 12, 31, 0, 0, 0, 0, time.UTC)},
		{At: stopAt, Reason: strings.Repeat("x", MaxReasonLen+1)},
	} {
		if body, err := encodeMarker(m); err == nil {
			t.Errorf("encodeMarker(%+v) = %q, want an error", m, body)
		}
	}
}

func FuzzParseMarker(f *testing.F) {
	data := "position=-1234 trusted=true at=2026-01-02T15:04:05.123456789Z\n"
	for _, s := range []string{
		header + data,
		header + data + `reason="SIGTERM"` + "\n",
		header + "at=2026-01-02T16:04:05+01:00 position=0 trusted=false\n",
		header + data + `reason="\xff\u00b5\n"` + "\n",
		"tankd-clean-stop 2\nnew things\n",
		"tankd-clean-stop 1\n",
		"",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, body []byte) {
		// Whatever parses, encodes, and parses back to itself.
		m, err := ParseMarker(body)
		if err == nil {
			again, err := encodeMarker(m)
			if err != nil {
				t.Fatalf("%q parses as %+v, which does not encode: %v", body, m, err)
			}
			if m2, err := ParseMarker(again); err != nil || !sameMarker(m2, m) {
				t.Fatalf("%q parses as %+v, encodes as %q, and parses back as %+v, %v", body, m, again, m2, err)
			}
		} else if errors.Is(err, ErrMarkerFormat) == errors.Is(err, ErrMarkerVersion) {
			t.Fatalf("ParseMarker error %v: want exactly one of ErrMarkerFormat and ErrMarkerVersion", err)
		}
		// Any reason, cut to the limit, survives the round trip.
		r := string(body[:min(len(body), MaxReasonLen)])
		enc, err := encodeMarker(Marker{Position: int64(len(body)), At: stopAt, Reason: r})
		if err != nil {
			t.Fatal(err)
		}
		if got, err := ParseMarker(enc); err != nil || got.Reason != r {
			t.Fatalf("reason %q encoded as %q parses as %q, %v", r, enc, got.Reason, err)
		}
	})
}

// The position hint survives a crash (it is not taken at start), round-trips, and is absent on a
// first run.
func TestHintRoundTrip(t *testing.T) {
	d, err := Open(t.TempDir(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	if _, ok, err := d.Hint(); ok || err != nil {
		t.Fatalf("first run: hint %v, %v", ok, err)
	}
	at := time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC)
	want := Marker{Position: -4321, Trusted: true, At: at, Reason: "after a tune"}
	if err := d.WriteHint(want); err != nil {
		t.Fatal(err)
	}
	for range 2 { // reading does not consume it
		got, ok, err := d.Hint()
		if !ok || err != nil || got.Position != want.Position || !got.At.Equal(at) || got.Reason != want.Reason {
			t.Fatalf("hint %+v, %v, %v; want %+v", got, ok, err, want)
		}
	}
}
