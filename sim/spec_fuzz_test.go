package sim

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"
)

// FuzzParseSpec: whatever the text, the parser returns a valid spec or an error, never a spec
// that fails its own validation, and never panics.
func FuzzParseSpec(f *testing.F) {
	files, _ := filepath.Glob("../configs/station-*.toml")
	for _, p := range files {
		if b, err := os.ReadFile(p); err == nil {
			f.Add(b)
		}
	}
	f.Add([]byte("[loop]\nturns = 3\n[capacitor]\ntable = [[0, 10], [1, 400]]\n"))
	f.Add([]byte("[drive.home]\nat_turns = -5\n"))
	f.Add([]byte("name = 'x'\n[coupler]\ndetector = \"square\"\nsensitivity_v_per_w = 0\n"))
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
	})
}
