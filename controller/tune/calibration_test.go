package tune

import (
	"errors"
	"os"
	"path/filepath"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/store"
)

func TestCalibrationRoundTrip(t *testing.T) {
	path := filepath.Join(t.TempDir(), "calibration")
	want := Calibration{Backlash: 49, Freq: 3504 * physic.KiloHertz, At: time.Date(2026, 3, 1, 12, 0, 0, 5, time.UTC)}
	if err := SaveCalibration(path, want); err != nil {
		t.Fatal(err)
	}
	got, err := LoadCalibration(path)
	if err != nil {
		t.Fatal(err)
	}
	if got.Backlash != want.Backlash || got.Freq != want.Freq || !got.At.Equal(want.At) {
		t.Fatalf("round trip: %+v, want %+v", got, want)
	}
	// A second save keeps the first as the previous copy; spoil the main file and the previous
	// one is used, and said so.
	want2 := want
	want2.Backlash = 51
	if err := SaveCalibration(path, want2); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, []byte("tankd-calibration 1\nbacklash=9"), 0o600); err != nil {
		t.Fatal(err)
	}
	got, err = LoadCalibration(path)
	if !errors.Is(err, store.ErrUsedPrevious) || got.Backlash != 49 {
		t.Fatalf("torn file: %+v, %v; want the previous copy (49) and ErrUsedPrevious", got, err)
	}
}

func TestParseCalibrationRejects(t *testing.T) {
	for _, body := range []string{
		"",
		"tankd-calibration 2\nbacklash=1 freq=1 at=2026-01-01T00:00:00Z\n",
		"tankd-calibration 1\nbacklash=-1 freq=3500000 at=2026-01-01T00:00:00Z\n",
		"tankd-calibration 1\nbacklash=1 freq=0 at=2026-01-01T00:00:00Z\n",
		"tankd-calibration 1\nbacklash=1 freq=3500000\n",
		"tankd-calibration 1\nbacklash=1 backlash=2 freq=3500000 at=2026-01-01T00:00:00Z\n",
		"tankd-calibration 1\nbacklash=1 freq=3500000 at=yesterday\n",
		"tankd-calibration 1\nbacklash=1 freq=3500000 at=2026-01-01T00:00:00Z colour=red\n",
	} {
		if _, err := ParseCalibration([]byte(body)); !errors.Is(err, ErrCalibrationFormat) {
			t.Errorf("%q: %v, want ErrCalibrationFormat", body, err)
		}
	}
}

func FuzzParseCalibration(f *testing.F) {
	f.Add([]byte("tankd-calibration 1\nbacklash=49 freq=3504000 at=2026-01-01T12:00:00Z\n"))
	f.Add([]byte("tankd-calibration 1\r\nbacklash=0 freq=1 at=2026-01-01T12:00:00.5Z\r\n"))
	f.Add([]byte("tankd-calibration 1\nbacklash=\n"))
	f.Fuzz(func(t *testing.T, body []byte) {
		c, err := ParseCalibration(body)
		if err != nil {
			return
		}
		if c.Backlash < 0 || c.Freq <= 0 {
			t.Fatalf("accepted %+v", c)
		}
	})
}
