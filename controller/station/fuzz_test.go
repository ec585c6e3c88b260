package station

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"
)

// FuzzParse: whatever the text, the parser returns a valid description or an error, never one
// that fails its own validation or gives no prior, and never panics.
func FuzzParse(f *testing.F) {
	files, _ := filepath.Glob("../../configs/stations/*.toml")
	for _, p := range files {
		if b, err := os.ReadFile(p); err == nil {
			f.Add(b) // rejected for their [simulator] sections, but a useful start
		}
	}
	f.Add([]byte("[loop]\nturns = 3\n[capacitor]\ntable = [[0, 10], [1, 400]]\n"))
	f.Add([]byte("[drive.home]\nat_turns = -5\n"))
	f.Add([]byte("name = 'x'\n[coupler]\ndetector = \"square\"\nsensitivity_v_per_w = 0\n"))
	f.Add([]byte("[tolerance]\ncapacitance = 0.1\nstray_pf = 0\n[site]\nmean_c = -40\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		d, err := Parse(bytes.NewReader(b))
		if err != nil {
			return
		}
		if err := d.Validate(); err != nil {
			t.Fatalf("parsed a description that does not validate: %v", err)
		}
		if _, err := d.MapOptions(); err != nil {
			t.Fatalf("a valid description gives no prior: %v", err)
		}
		if _, err := d.Calibration(); err != nil {
			t.Fatalf("a valid description gives no calibration: %v", err)
		}
	})
}
