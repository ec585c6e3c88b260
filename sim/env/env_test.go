package env

import (
	"math"
	"strings"
	"testing"
	"time"
)

func TestDailySwing(t *testing.T) {
	w, err := New(Options{Mean: 12, Swing: 6, PeakHour: 14})
	if err != nil {
		t.Fatal(err)
	}
	day := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	if got := w.Temperature(day.Add(14 * time.Hour)); math.Abs(got-18) > 1e-9 {
		t.Errorf("at the peak hour %g °C, want 18", got)
	}
	if got := w.Temperature(day.Add(2 * time.Hour)); math.Abs(got-6) > 1e-9 {
		t.Errorf("twelve hours later %g °C, want 6", got)
	}
}

func TestWanderIsSeededAndBounded(t *testing.T) {
	a, _ := New(Options{Mean: 10, Wander: 3, Seed: 1})
	b, _ := New(Options{Mean: 10, Wander: 3, Seed: 1})
	c, _ := New(Options{Mean: 10, Wander: 3, Seed: 2})
	start := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	differ := false
	for i := range 500 {
		at := start.Add(time.Duration(i) * 7 * time.Minute)
		ta, tb := a.Temperature(at), b.Temperature(at)
		if ta != tb {
			t.Fatal("same seed, different weather")
		}
		if math.Abs(ta-10) > 3+1e-9 {
			t.Fatalf("wander %g K beyond its amplitude", ta-10)
		}
		differ = differ || ta != c.Temperature(at)
	}
	if !differ {
		t.Error("another seed gave the same weather")
	}
	if _, err := New(Options{Mean: 200}); err == nil {
		t.Error("200 °C accepted")
	}
}

func TestValidateRejectsNonFinite(t *testing.T) {
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		for _, c := range []struct {
			what string
			o    Options
		}{
			{"mean", Options{Mean: bad}},
			{"swing", Options{Swing: bad}},
			{"wander", Options{Wander: bad}},
			{"peak hour", Options{PeakHour: bad}},
		} {
			err := c.o.Validate()
			if err == nil || !strings.Contains(err.Error(), c.what+" ") || !strings.Contains(err.Error(), "want") {
				t.Errorf("%s = %g: %v", c.what, bad, err)
			}
		}
	}
	// every problem at once
	err := Options{Mean: math.NaN(), Swing: -1}.Validate()
	if err == nil || !strings.Contains(err.Error(), "mean NaN") || !strings.Contains(err.Error(), "swing -1") {
		t.Errorf("not every problem reported: %v", err)
	}
}
