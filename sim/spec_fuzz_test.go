package sim

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"

	"github.com/tankd/tankd/sim/vclock"
)

// FuzzParseSpec: whatever the text, the parser returns a valid spec or an error, never a spec
// that fails its own validation or that NewStation cannot build, and never panics.
func FuzzParseSpec(f *testing.F) {
	files, _ := filepath.Glob("../configs/stations/*.toml")
	for _, p := range files {
		if b, err := os.ReadFile(p); err == nil {
			f.Add(b)
		}
	}
	f.Add([]byte("[loop]\nturns = 3\n[capacitor]\ntable = [[0, 10], [1, 400]]\n"))
	f.Add([]byte("[drive.home]\nat_turns = -5\n"))
	f.Add([]byte("name = 'x'\n[coupler]\ndetector = \"square\"\nsensitivity_v_per_w = 0\n"))
	f.Add([]byte("[simulator]\nseed = 9\n[simulator.coupler]\nadc_bits = 24\nconversion_us = 1\n[simulator.radio]\nfrequency_hz = 1800000\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		s, err := ParseSpec(bytes.NewReader(b))
		if err != nil {
			return
		}
		if err := s.Validate(); err != nil {
			t.Fatalf("parsed a spec that does not validate: %v", err)
		}
		c, err := s.CapacitorModel()
		if err != nil {
			t.Fatalf("a valid spec gives no capacitor: %v", err)
		}
		if _, err := NewRF(s.Model(), s.FeedModel(), c); err != nil {
			t.Fatalf("a valid spec gives no RF model: %v", err)
		}
		// The radio refuses a start outside the amateur bands, which the description's
		// frequency range allows: only a station on a band must build.
		if _, err := NewStation(s, vclock.New(vclock.Epoch)); err != nil && s.Simulator.Radio.FrequencyHz == DefaultSpec().Simulator.Radio.FrequencyHz {
			t.Fatalf("a valid spec gives no station: %v", err)
		}
	})
}
