package env

import (
	"math"
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
