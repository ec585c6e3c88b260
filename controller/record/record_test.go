package record

import (
	"bytes"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"testing/iotest"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

var start = time.Date(2026, time.January, 1, 0, 0, 0, 0, time.UTC)

func same(a, b Sample) bool {
	swr := a.SWR == b.SWR || math.IsNaN(a.SWR) && math.IsNaN(b.SWR)
	a.SWR, b.SWR = 0, 0
	return a == b && swr
}

func sameSamples(t *testing.T, got, want []Sample) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("got %d samples, want %d", len(got), len(want))
	}
	for i := range got {
		if !same(got[i], want[i]) {
			t.Fatalf("sample %d = %+v, want %+v", i, got[i], want[i])
		}
	}
}

func sameHeader(t *testing.T, got, want Header) {
	t.Helper()
	if got.Version != want.Version || !got.Start.Equal(want.Start) || len(got.Meta) != len(want.Meta) {
		t.Fatalf("header = %+v, want %+v", got, want)
	}
	for k, v := range want.Meta {
		if g, ok := got.Meta[k]; !ok || g != v {
			t.Fatalf("meta %q = %q (present %v), want %q", k, g, ok, v)
		}
	}
}

// The expected text is the version 1 layout described in the package documentation: start first,
// other keys sorted, t_s with 6 to 9 decimals, powers with at least 4, shortest SWR.
func TestWriteLayout(t *testing.T) {
	var buf bytes.Buffer
	w, err := NewWriter(&buf, Header{Start: start, Meta: map[string]string{
		"source": "tanksim", "seed": "42", "loop": "garden loop, two turns", "note": "",
	}})
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range []Sample{
		{T: 1160 * time.Microsecond, Step: 40210, Dir: motion.Up, Freq: 3750 * physic.KiloHertz,
			Forward: 4981200 * physic.MicroWatt, Reflected: 2100 * physic.MicroWatt, SWR: 1.0435718},
		{T: 2320 * time.Microsecond, Step: -7, Dir: motion.Down, Freq: 3750000*physic.Hertz + 500*physic.MilliHertz,
			Forward: 5 * physic.Watt, Reflected: 1 * physic.NanoWatt, SWR: math.Inf(1)},
		{T: time.Second + time.Nanosecond, Dir: motion.Up, SWR: math.NaN()},
	} {
		if err := w.Write(s); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
	want := `tankd-sweep 1
@ start=2026-01-01T00:00:00Z
@ loop="garden loop, two turns"
@ note=""
@ seed=42
@ source=tanksim
t_s step dir freq_hz fwd_w ref_w swr
0.001160 40210 + 3750000 4.9812 0.0021 1.0435718
0.002320 -7 - 3750000.5 5.0000 0.000000001 inf
1.000000001 0 + 0 0.0000 0.0000 nan
`
	if got := buf.String(); got != want {
		t.Fatalf("wrote\n%s\nwant\n%s", got, want)
	}
}

func TestRead(t *testing.T) {
	up := func(sec float64, step int64, swr float64) Sample {
		return Sample{T: time.Duration(sec * 1e9), Step: step, Dir: motion.Up, Freq: 7100 * physic.KiloHertz,
			Forward: 5 * physic.Watt, Reflected: 10 * physic.MilliWatt, SWR: swr}
	}
	for _, tc := range []struct {
		name string
		in   string
		h    Header
		s    []Sample
	}{
		{
			name: "no samples",
			in:   "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n",
			h:    Header{Version: 1, Start: start},
		},
		{
			name: "no final newline",
			in:   "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n0.5 12 + 7100000 5 0.01 1.2",
			h:    Header{Version: 1, Start: start},
			s:    []Sample{up(0.5, 12, 1.2)},
		},
		{
			name: "CRLF, BOM, comments, blanks, tabs and trailing blanks",
			in: "\uFEFFtankd-sweep 1\r\n# made by hand\r\n\r\n@ start=2026-01-01T01:00:00+01:00\tloop=\"back yard\" \r\n" +
				"  # indented comment\r\n@ seed=7\r\nt_s\tstep dir  freq_hz fwd_w ref_w swr \r\n" +
				"0.5\t12 + 7100000 5.0 0.010 1.2\r\n# between samples\r\n\r\n1 13 + 7100000 5 0.01 1.25 \t\r\n",
			h: Header{Version: 1, Start: start, Meta: map[string]string{"loop": "back yard", "seed": "7"}},
			s: []Sample{up(0.5, 12, 1.2), up(1, 13, 1.25)},
		},
		{
			name: "quoted escapes and odd bare values",
			in: "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z a.b-c_d=x=y#z e=\"tab\\there \\\"q\\\" \\u00e9\" f=\"\" g=é\n" +
				"t_s step dir freq_hz fwd_w ref_w swr\n",
			h: Header{Version: 1, Start: start, Meta: map[string]string{
				"a.b-c_d": "x=y#z", "e": "tab\there \"q\" é", "f": "", "g": "é"}},
		},
		{
			name: "signs, exponents, rounding and infinity",
			in: "tankd-sweep 1\n@ start=2026-01-01T00:00:00.5Z\nt_s step dir freq_hz fwd_w ref_w swr\n" +
				"0.0000000015 -40 - 3500000.0000005 0.0000000004999 0.0000000005 1.5e0\n" +
				"0.0000000015 +40 + 3500000 1 1 Inf\n",
			h: Header{Version: 1, Start: start.Add(500 * time.Millisecond)},
			// Half-up rounding to the unit: 1.5 ns → 2 ns, 0.5 µHz → 1 µHz, 0.4999 nW → 0, 0.5 nW → 1.
			s: []Sample{
				{T: 2, Step: -40, Dir: motion.Down, Freq: 3500000*physic.Hertz + 1, Forward: 0, Reflected: 1, SWR: 1.5},
				{T: 2, Step: 40, Dir: motion.Up, Freq: 3500 * physic.KiloHertz, Forward: physic.Watt,
					Reflected: physic.Watt, SWR: math.Inf(1)},
			},
		},
	} {
		t.Run(tc.name, func(t *testing.T) {
			h, s, err := ReadAll(strings.NewReader(tc.in))
			if err != nil {
				t.Fatal(err)
			}
			sameHeader(t, h, tc.h)
			sameSamples(t, s, tc.s)
		})
	}
}

func TestReadErrors(t *testing.T) {
	const head = "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n"
	const ok = "0.1 1 + 7000000 5 0.1 1.3\n"
	for _, tc := range []struct {
		name string
		in   string
		line int
		is   error  // nil: only a *ParseError is expected
		text string // part of the message
	}{
		{"empty", "", 1, nil, `empty file, want "tankd-sweep 1"`},
		{"other file", "hello world\n", 1, nil, "not a sweep recording"},
		{"signature alone", "tankd-sweep\n", 1, nil, "not a sweep recording"},
		{"newer version", "tankd-sweep 2\n", 1, ErrVersion, "this package reads version 1"},
		{"version not a number", "tankd-sweep one\n", 1, ErrVersion, `version "one"`},
		{"ends in header", "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\n# no columns\n", 3, nil, "before the column line"},
		{"no start", "tankd-sweep 1\n@ seed=1\nt_s step dir freq_hz fwd_w ref_w swr\n", 3, nil, `no "start"`},
		{"bad start", "tankd-sweep 1\n@ start=yesterday\n", 2, nil, "RFC 3339"},
		{"zero start", "tankd-sweep 1\n@ start=0001-01-01T00:00:00Z\n", 2, nil, "zero instant"},
		{"start twice", "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z start=2026-01-01T00:00:00Z\n", 2, nil, "twice"},
		{"key twice", "tankd-sweep 1\n@ a=1\n@ a=2\n", 3, nil, "a given twice"},
		{"no equals", "tankd-sweep 1\n@ loop\n", 2, nil, "want key=value"},
		{"bad key", "tankd-sweep 1\n@ 9lives=1\n", 2, nil, `key "9lives"`},
		{"key with blank", "tankd-sweep 1\n@ a b=1\n", 2, nil, `key "a b"`},
		{"empty bare value", "tankd-sweep 1\n@ a= b=1\n", 2, nil, "empty value"},
		{"quote in bare value", "tankd-sweep 1\n@ a=x\"y\n", 2, nil, "quote it"},
		{"unterminated quote", "tankd-sweep 1\n@ a=\"xy\n", 2, nil, "bad quoted value"},
		{"junk after quote", "tankd-sweep 1\n@ a=\"x\"y\n", 2, nil, "blank after the quoted value"},
		{"columns swapped", "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s dir step freq_hz fwd_w ref_w swr\n", 3, nil, "column line"},
		{"column missing", "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w\n", 3, nil, "column line"},
		{"too few fields", head + "0.1 1 + 7000000 5 0.1\n", 4, nil, "6 fields, want 7"},
		{"too many fields", head + ok + "0.2 1 + 7000000 5 0.1 1.3 x\n", 5, nil, "8 fields"},
		{"metadata after columns", head + "@ late=1\n", 4, nil, "metadata after the column line"},
		{"negative time", head + "-0.1 1 + 7000000 5 0.1 1.3\n", 4, nil, "t_s"},
		{"time with exponent", head + "1e-3 1 + 7000000 5 0.1 1.3\n", 4, nil, "t_s"},
		{"time without integer part", head + ".5 1 + 7000000 5 0.1 1.3\n", 4, nil, "t_s"},
		{"time without decimals", head + "5. 1 + 7000000 5 0.1 1.3\n", 4, nil, "t_s"},
		{"time too large", head + "9223372037 1 + 7000000 5 0.1 1.3\n", 4, nil, "too large"},
		{"time backwards", head + "0.2 1 + 7000000 5 0.1 1.3\n" + ok, 5, ErrInvalid, "before the previous"},
		{"step not integer", head + "0.1 1.5 + 7000000 5 0.1 1.3\n", 4, nil, "step"},
		{"dir word", head + "0.1 1 up 7000000 5 0.1 1.3\n", 4, nil, "want + or -"},
		{"negative frequency", head + "0.1 1 + -7000000 5 0.1 1.3\n", 4, nil, "freq_hz"},
		{"frequency too large", head + "0.1 1 + 9300000000000 5 0.1 1.3\n", 4, nil, "too large"},
		{"forward in milliwatts", head + "0.1 1 + 7000000 5mW 0.1 1.3\n", 4, nil, "fwd_w"},
		{"negative reflected", head + "0.1 1 + 7000000 5 -0.1 1.3\n", 4, nil, "ref_w"},
		{"swr below one", head + "0.1 1 + 7000000 5 0.1 0.99\n", 4, ErrInvalid, "below 1"},
		{"swr minus infinity", head + "0.1 1 + 7000000 5 0.1 -inf\n", 4, nil, "swr"},
		{"swr negative", head + "0.1 1 + 7000000 5 0.1 -2\n", 4, ErrInvalid, "below 1"},
		{"swr overflows", head + "0.1 1 + 7000000 5 0.1 1e400\n", 4, nil, "swr"},
		{"swr word", head + "0.1 1 + 7000000 5 0.1 high\n", 4, nil, "swr"},
		{"swr in hexadecimal", head + "0.1 1 + 7000000 5 0.1 0x1p1\n", 4, nil, "swr"},
		{"swr infinity spelt out", head + "0.1 1 + 7000000 5 0.1 infinity\n", 4, nil, "swr"},
		{"not UTF-8", head + ok + "# \xff\xfe\n", 5, nil, "UTF-8"},
		{"line too long", head + ok + strings.Repeat("1", maxLine+1) + "\n", 5, nil, "longer than"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := ReadAll(strings.NewReader(tc.in))
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %v, want a *ParseError", err)
			}
			if pe.Line != tc.line {
				t.Errorf("line %d, want %d (%v)", pe.Line, tc.line, err)
			}
			if tc.is != nil && !errors.Is(err, tc.is) {
				t.Errorf("error %v does not wrap %v", err, tc.is)
			}
			if !strings.Contains(err.Error(), tc.text) {
				t.Errorf("error %q does not say %q", err, tc.text)
			}
			if want := "record: line "; !strings.HasPrefix(err.Error(), want) {
				t.Errorf("error %q does not start with %q", err, want)
			}
		})
	}
}

func TestReaderSticksAfterEndAndError(t *testing.T) {
	const head = "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n"
	r, err := NewReader(strings.NewReader(head + "0.1 1 + 7000000 5 0.1 1.3\n"))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := r.Next(); err != nil {
		t.Fatal(err)
	}
	for range 2 {
		if _, err := r.Next(); err != io.EOF {
			t.Fatalf("Next after the last sample = %v, want io.EOF", err)
		}
	}
	r, err = NewReader(strings.NewReader(head + "x\n0.1 1 + 7000000 5 0.1 1.3\n"))
	if err != nil {
		t.Fatal(err)
	}
	_, first := r.Next()
	if _, again := r.Next(); first == nil || again != first {
		t.Fatalf("Next after %v = %v, want the same error", first, again)
	}
}

func TestReadPassesOnIOErrors(t *testing.T) {
	boom := errors.New("boom")
	head := "tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n0.1 1 + 7000000 5 0.1 1.3\n"
	for _, n := range []int{0, 20, len(head)} {
		_, s, err := ReadAll(io.MultiReader(strings.NewReader(head[:n]), iotest.ErrReader(boom)))
		if !errors.Is(err, boom) {
			t.Fatalf("after %d bytes: error %v, want it to wrap %v", n, err, boom)
		}
		if n == len(head) && len(s) != 1 {
			t.Fatalf("after a whole sample and a read error: got %d samples, want the 1 read", len(s))
		}
	}
}

type failWriter struct{ err error }

func (f failWriter) Write([]byte) (int, error) { return 0, f.err }

func TestWriterRejects(t *testing.T) {
	good := Sample{T: time.Second, Step: 1, Dir: motion.Up, Freq: physic.MegaHertz, Forward: physic.Watt, SWR: 1}
	for _, tc := range []struct {
		name string
		h    Header
		is   error
	}{
		{"no start", Header{}, ErrInvalid},
		{"other version", Header{Version: 2, Start: start}, ErrVersion},
		{"reserved key", Header{Start: start, Meta: map[string]string{"start": "x"}}, ErrInvalid},
		{"bad key", Header{Start: start, Meta: map[string]string{"a=b": "x"}}, ErrInvalid},
		{"empty key", Header{Start: start, Meta: map[string]string{"": "x"}}, ErrInvalid},
		{"year beyond RFC 3339", Header{Start: time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC)}, ErrInvalid},
	} {
		t.Run("header "+tc.name, func(t *testing.T) {
			if _, err := NewWriter(io.Discard, tc.h); !errors.Is(err, tc.is) {
				t.Fatalf("NewWriter = %v, want %v", err, tc.is)
			}
		})
	}
	for _, tc := range []struct {
		name string
		edit func(*Sample)
	}{
		{"negative time", func(s *Sample) { s.T = -1 }},
		{"time backwards", func(s *Sample) { s.T = time.Second - 1 }},
		{"no direction", func(s *Sample) { s.Dir = 0 }},
		{"direction 2", func(s *Sample) { s.Dir = 2 }},
		{"negative frequency", func(s *Sample) { s.Freq = -1 }},
		{"negative forward", func(s *Sample) { s.Forward = -1 }},
		{"negative reflected", func(s *Sample) { s.Reflected = -1 }},
		{"swr below 1", func(s *Sample) { s.SWR = 0.999 }},
		{"swr -inf", func(s *Sample) { s.SWR = math.Inf(-1) }},
	} {
		t.Run("sample "+tc.name, func(t *testing.T) {
			var buf bytes.Buffer
			w, err := NewWriter(&buf, Header{Start: start})
			if err != nil {
				t.Fatal(err)
			}
			if err := w.Write(good); err != nil {
				t.Fatal(err)
			}
			bad := good
			tc.edit(&bad)
			if err := w.Write(bad); !errors.Is(err, ErrInvalid) {
				t.Fatalf("Write(%+v) = %v, want ErrInvalid", bad, err)
			}
			// A refused sample leaves the recording intact and the writer usable.
			if err := w.Write(good); err != nil {
				t.Fatal(err)
			}
			if err := w.Flush(); err != nil {
				t.Fatal(err)
			}
			_, s, err := ReadAll(&buf)
			if err != nil {
				t.Fatal(err)
			}
			sameSamples(t, s, []Sample{good, good})
		})
	}
}

func TestWriterReportsWriteErrors(t *testing.T) {
	boom := errors.New("disk full")
	w, err := NewWriter(failWriter{boom}, Header{Start: start})
	if err != nil {
		t.Fatal(err) // the header waits in the buffer
	}
	if err := w.Flush(); !errors.Is(err, boom) {
		t.Fatalf("Flush = %v, want %v", err, boom)
	}
	s := Sample{Dir: motion.Up, SWR: 1}
	if err := w.Write(s); !errors.Is(err, boom) {
		t.Fatalf("Write after a failed flush = %v, want %v", err, boom)
	}
}

// randomString mixes the characters that decide between bare and quoted values.
func randomString(r *rand.Rand) string {
	alphabet := []rune{'a', 'Z', '0', '=', '#', '"', '\\', ' ', '\t', '\n', '\r', 'é', '\u00a0', '\u2028', '\x00', '\uFFFD', '@'}
	b := make([]rune, r.IntN(6))
	for i := range b {
		b[i] = alphabet[r.IntN(len(alphabet))]
	}
	return string(b)
}

func TestRoundTrip(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2)) // fixed seed: the same cases every run
	for run := range 50 {
		h := Header{
			Version: 1,
			Start:   start.Add(time.Duration(r.Int64N(int64(100 * 365 * 24 * time.Hour)))).In(time.FixedZone("", (r.IntN(49)-24)*30*60)),
			Meta:    map[string]string{},
		}
		for range r.IntN(5) {
			key := string(rune('a'+r.IntN(26))) + strings.Map(func(c rune) rune {
				if validKey("a" + string(c)) {
					return c
				}
				return '_'
			}, randomString(r))
			h.Meta[key] = randomString(r)
		}
		if len(h.Meta) == 0 {
			h.Meta = nil
		}
		want := make([]Sample, 1+r.IntN(200))
		var now time.Duration
		for i := range want {
			now += time.Duration(r.Int64N(int64(10 * time.Millisecond)))
			if r.IntN(10) == 0 {
				now += time.Duration(r.Int64N(1 << 40))
			}
			s := Sample{
				T:         now,
				Step:      r.Int64() - r.Int64(),
				Dir:       motion.Up,
				Freq:      physic.Frequency(r.Int64()),
				Forward:   physic.Power(r.Int64N(int64(2 * physic.KiloWatt))),
				Reflected: physic.Power(r.Int64N(int64(10 * physic.MilliWatt))),
				SWR:       1 + r.ExpFloat64(),
			}
			switch r.IntN(8) {
			case 0:
				s.Dir = motion.Down
			case 1:
				s.SWR, s.Forward, s.Reflected = math.NaN(), 0, 0
			case 2:
				s.SWR = math.Inf(1)
			case 3:
				s.SWR = 1
			case 4:
				s.Freq = physic.Frequency(r.Int64N(int64(30*physic.MegaHertz))) / physic.Hertz * physic.Hertz
			}
			want[i] = s
		}
		var buf bytes.Buffer
		w, err := NewWriter(&buf, h)
		if err != nil {
			t.Fatalf("run %d: %v", run, err)
		}
		for _, s := range want {
			if err := w.Write(s); err != nil {
				t.Fatalf("run %d: %v", run, err)
			}
		}
		if err := w.Flush(); err != nil {
			t.Fatal(err)
		}
		text := buf.String()
		gotH, got, err := ReadAll(&buf)
		if err != nil {
			t.Fatalf("run %d: reading back: %v\n%s", run, err, text)
		}
		sameHeader(t, gotH, h)
		sameSamples(t, got, want)
	}
}

func TestFixed(t *testing.T) {
	// Expected strings follow from place value: a count of 10^-scale units written in decimal.
	for _, tc := range []struct {
		v             int64
		scale, minDec int
		text          string
	}{
		{0, 9, 0, "0"},
		{0, 9, 4, "0.0000"},
		{1, 9, 4, "0.000000001"},
		{10, 9, 4, "0.00000001"},
		{5_000_000_000, 9, 4, "5.0000"},
		{4_981_200_000, 9, 4, "4.9812"},
		{1_160_000, 9, 6, "0.001160"},
		{1_160_001, 9, 6, "0.001160001"},
		{3_750_000_000_000, 6, 0, "3750000"},
		{3_750_000_500_000, 6, 0, "3750000.5"},
		{math.MaxInt64, 9, 0, "9223372036.854775807"},
	} {
		got := string(appendFixed(nil, tc.v, tc.scale, tc.minDec))
		if got != tc.text {
			t.Errorf("appendFixed(%d, %d, %d) = %q, want %q", tc.v, tc.scale, tc.minDec, got, tc.text)
		}
		back, err := parseFixed(got, tc.scale)
		if err != nil || back != tc.v {
			t.Errorf("parseFixed(%q, %d) = %d, %v, want %d", got, tc.scale, back, err, tc.v)
		}
	}
	for _, tc := range []struct {
		text string
		v    int64
		bad  bool
	}{
		{"0.0000000005", 1, false}, // half up
		{"0.00000000049", 0, false},
		{"1.9999999995", 2_000_000_000, false},
		{"9223372036.8547758075", 0, true}, // rounding up past the largest int64
		{"9223372036.854775808", 0, true},
		{"", 0, true},
		{"+1", 0, true},
		{"1_000", 0, true},
		{"1.2.3", 0, true},
	} {
		v, err := parseFixed(tc.text, 9)
		if (err != nil) != tc.bad || !tc.bad && v != tc.v {
			t.Errorf("parseFixed(%q, 9) = %d, %v; want %d, failure %v", tc.text, v, err, tc.v, tc.bad)
		}
	}
}

func benchSamples(n int) []Sample {
	s := make([]Sample, n)
	for i := range s {
		s[i] = Sample{T: time.Duration(i) * 1160 * time.Microsecond, Step: 40000 + int64(i), Dir: motion.Up,
			Freq: 3750 * physic.KiloHertz, Forward: 4981200 * physic.MicroWatt,
			Reflected: physic.Power(i%5000) * physic.MicroWatt, SWR: 1 + float64(i%5000)/977}
	}
	return s
}

func BenchmarkWrite(b *testing.B) {
	s := benchSamples(10000)
	b.ReportAllocs()
	for b.Loop() {
		w, err := NewWriter(io.Discard, Header{Start: start})
		if err != nil {
			b.Fatal(err)
		}
		for _, x := range s {
			if err := w.Write(x); err != nil {
				b.Fatal(err)
			}
		}
		if err := w.Flush(); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(s)), "ns/sample")
}

func BenchmarkReadAll(b *testing.B) {
	var buf bytes.Buffer
	w, _ := NewWriter(&buf, Header{Start: start})
	s := benchSamples(10000)
	for _, x := range s {
		if err := w.Write(x); err != nil {
			b.Fatal(err)
		}
	}
	if err := w.Flush(); err != nil {
		b.Fatal(err)
	}
	file := buf.Bytes()
	b.SetBytes(int64(len(file)))
	b.ReportAllocs()
	for b.Loop() {
		if _, got, err := ReadAll(bytes.NewReader(file)); err != nil || len(got) != len(s) {
			b.Fatal(len(got), err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(s)), "ns/sample")
}
