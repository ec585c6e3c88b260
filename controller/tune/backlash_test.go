package tune

import "testing"

func TestSymmetricAround(t *testing.T) {
	var s []sample
	for p := 0; p <= 100; p++ {
		s = append(s, sample{Pos: float64(p), Gamma2: 1})
	}
	for _, c := range []struct {
		centre, r float64
		lo, hi    float64
	}{
		{50, 10, 40, 60},  // within reach on both sides
		{90, 30, 80, 100}, // the readings stop 10 past the centre: as far before it
		{5, 30, 0, 10},    // and 5 before it
		{50, 80, 0, 100},
	} {
		got := symmetricAround(s, c.centre, c.r)
		if len(got) == 0 || got[0].Pos != c.lo || got[len(got)-1].Pos != c.hi {
			t.Errorf("around %g within %g: got %d samples from %v, want %g to %g", c.centre, c.r, len(got), got[:min(1, len(got))], c.lo, c.hi)
		}
	}
}
