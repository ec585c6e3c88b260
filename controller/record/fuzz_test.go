package record

import (
	"bytes"
	"errors"
	"strings"
	"testing"
)

// FuzzReader feeds the reader arbitrary bytes. It must never panic, must name a line in every
// format error, and whatever it accepts must survive being written and read again unchanged.
func FuzzReader(f *testing.F) {
	for _, seed := range []string{
		"tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n",
		"tankd-sweep 1\r\n@ start=2026-01-01T00:00:00Z source=tanksim loop=\"a \\\"b\\\"\"\r\n" +
			"t_s step dir freq_hz fwd_w ref_w swr\r\n0.001160 40210 + 3750000 4.9812 0.0021 1.0435718\r\n" +
			"# comment\r\n0.002320 40211 - 3750000.5 5 0.000000001 inf\r\n1 0 + 0 0 0 nan\r\n",
		"\uFEFFtankd-sweep 1\n# c\n@ start=2026-01-01T00:00:00.123456789+05:30\n@ e=\"\"\nt_s\tstep dir freq_hz fwd_w ref_w swr\n" +
			"0.0000000015 -1 - 1 0.0000000005 0 1e3\n",
		"",
		"tankd-sweep 2\n",
		"tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\n",
		"tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n0.2 1 + 1 1 1 1\n0.1 1 + 1 1 1 1\n",
		"tankd-sweep 1\n@ a=\"x\n",
		"tankd-sweep 1\n@ start=2026-01-01T00:00:00Z\nt_s step dir freq_hz fwd_w ref_w swr\n0.1 1 x 1 1 1 0.5\n",
	} {
		f.Add([]byte(seed))
	}
	f.Fuzz(func(t *testing.T, in []byte) {
		h, s, err := ReadAll(bytes.NewReader(in))
		if err != nil {
			var pe *ParseError
			if errors.As(err, &pe) && (pe.Line < 1 || !strings.HasPrefix(err.Error(), "record: line ")) {
				t.Fatalf("error %q names no line", err)
			}
			if pe == nil {
				t.Fatalf("error %v from an in-memory reader is not a *ParseError", err)
			}
			return
		}
		var buf bytes.Buffer
		w, err := NewWriter(&buf, h)
		if err != nil {
			t.Fatalf("cannot write back the header read: %v", err)
		}
		for _, x := range s {
			if err := w.Write(x); err != nil {
				t.Fatalf("cannot write back sample %+v: %v", x, err)
			}
		}
		if err := w.Flush(); err != nil {
			t.Fatal(err)
		}
		h2, s2, err := ReadAll(&buf)
		if err != nil {
			t.Fatalf("cannot read back what was written: %v\n%s", err, buf.String())
		}
		sameHeader(t, h2, h)
		sameSamples(t, s2, s)
	})
}
