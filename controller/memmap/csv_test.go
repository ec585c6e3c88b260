package memmap

import (
	"bytes"
	"errors"
	"slices"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"
)

func TestCSVRoundTrip(t *testing.T) {
	m := sessionMap(t, 17, 30)
	var buf bytes.Buffer
	if err := m.ExportCSV(&buf); err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(buf.String(), "frequency_hz,position,time,temperature_c,swr,q\n") {
		t.Fatalf("export starts %q", buf.String()[:60])
	}
	pts, err := ImportCSV(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(pts, m.Points()) {
		t.Fatalf("round trip changed the points:\n%+v\n%+v", pts, m.Points())
	}
}

func TestImportCSV(t *testing.T) {
	const head = "frequency_hz,position,time,temperature_c,swr,q\n"
	at := time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)
	for _, tc := range []struct {
		name string
		in   string
		want []Point
		errs []string // substrings the error must hold; nil: no error
	}{
		{"full row", head + "7074000,11000,2026-01-02T03:04:05Z,21.5,1.05,350\n",
			[]Point{{Freq: 7074 * physic.KiloHertz, Pos: 11000, At: at, Temp: celsius(21.5), HasTemp: true, SWR: 1.05, Q: 350}}, nil},
		{"unknowns empty", head + "3573000.5,46000,,,,\n",
			[]Point{{Freq: 3573000*physic.Hertz + 500*physic.MilliHertz, Pos: 46000}}, nil},
		{"spreadsheet habits", "\uFEFF" + strings.ReplaceAll(head, "\n", "\r\n") + "7.074E+06, -12 ,2026-01-02T04:04:05+01:00,-3,1,0\r\n",
			[]Point{{Freq: 7074 * physic.KiloHertz, Pos: -12, At: at, Temp: celsius(-3), HasTemp: true, SWR: 1}}, nil},
		{"header only", head, nil, nil},
		{"empty", "", nil, []string{"header"}},
		{"wrong header", "freq,pos,time,temp,swr,q\n", nil, []string{"line 1", "header"}},
		{"bad rows", head +
			"7074000,11000,,,,\n" +
			"0,11000,,,,\n" +
			"7074000,eleven,,,,\n" +
			"7074000,11000,yesterday,,,\n" +
			"7074000,11000,,hot,,\n" +
			"7074000,11000,,,0.5,\n" +
			"7074000,11000,,,0,\n" +
			"7074000,11000,,,,-1\n" +
			"7074000,11000,,,,NaN\n" +
			"7074000,11000\n" +
			"7074000,11000,,-300,,\n",
			nil, []string{"line 3: ", "line 4: position", "line 5: time", "line 6: temperature_c",
				"line 7: ", "swr 0.5", "line 8: ", "line 9: ", "line 10: q", "line 11: want 6 cells", "line 12: "}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			pts, err := ImportCSV(strings.NewReader(tc.in))
			if tc.errs == nil {
				if err != nil {
					t.Fatal(err)
				}
				if !slices.Equal(pts, tc.want) {
					t.Fatalf("got %+v\nwant %+v", pts, tc.want)
				}
				return
			}
			if err == nil || pts != nil {
				t.Fatalf("ImportCSV = %+v, %v; want an error and no points", pts, err)
			}
			for _, s := range tc.errs {
				if !strings.Contains(err.Error(), s) {
					t.Errorf("error %q lacks %q", err, s)
				}
			}
		})
	}
	_, err := ImportCSV(strings.NewReader(head + "7074000,11000,,,0.5,\n"))
	if !errors.Is(err, ErrInvalidPoint) {
		t.Errorf("a bad swr gives %v, want ErrInvalidPoint", err)
	}
}

func FuzzImportCSV(f *testing.F) {
	f.Add("frequency_hz,position,time,temperature_c,swr,q\n7074000,11000,2026-01-02T03:04:05Z,21.5,1.05,350\n")
	f.Add("frequency_hz,position,time,temperature_c,swr,q\n3573000.5,46000,,,,\n7.1e6,1,,,,\n")
	f.Add("frequency_hz,position,time,temperature_c,swr,q\n\"7074000\",\"1\"\"\",,,,\n")
	f.Add("frequency_hz,position\n1,2\n")
	f.Fuzz(func(t *testing.T, in string) {
		pts, err := ImportCSV(strings.NewReader(in))
		if err != nil {
			return
		}
		// Whatever imports exports and imports again unchanged.
		m := mustNew(t, Options{MergeWithin: -1, MaxPoints: len(pts) + 2})
		var want []Point
		for _, p := range pts {
			if m.Learn(p) == nil {
				want = append(want, p)
			}
		}
		var buf bytes.Buffer
		if err := m.ExportCSV(&buf); err != nil {
			t.Fatal(err)
		}
		again, err := ImportCSV(&buf)
		if err != nil {
			t.Fatalf("re-import of %q: %v", buf.String(), err)
		}
		if !slices.Equal(again, m.Points()) {
			t.Fatalf("round trip changed %+v into %+v", m.Points(), again)
		}
	})
}
