package tune

import (
	"math"
	"math/rand/v2"
	"testing"
)

func TestLSQRecoversPolynomial(t *testing.T) {
	// Exact data from a known polynomial must come back to rounding error; noisy data must come
	// back within the textbook standard error.
	r := rand.New(rand.NewPCG(1, 2))
	want := []float64{1.5, -2, 0.25}
	var a [][]float64
	var b []float64
	for i := range 50 {
		x := float64(i)/10 - 2.5
		a = append(a, []float64{1, x, x * x})
		b = append(b, want[0]+want[1]*x+want[2]*x*x+1e-3*r.NormFloat64())
	}
	got, err := lsq(a, b, 3)
	if err != nil {
		t.Fatal(err)
	}
	for i := range want {
		if math.Abs(got[i]-want[i]) > 2e-3 {
			t.Errorf("θ[%d] = %g, want %g", i, got[i], want[i])
		}
	}
	if _, err := lsq([][]float64{{1, 1}, {2, 2}, {3, 3}}, []float64{1, 2, 3}, 2); err == nil {
		t.Error("collinear columns not reported")
	}
}
