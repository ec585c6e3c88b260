package tune

import (
	"errors"
	"math"
)

var errSingular = errors.New("least squares: rank deficient")

// lsq solves the weighted linear least-squares problem min Σ (A_i·θ − b_i)² for θ by
// Householder QR, which is stable where the normal equations would square the condition
// number. a holds rows of n unknowns; a and b are overwritten.
func lsq(a [][]float64, b []float64, n int) ([]float64, error) {
	m := len(a)
	if m < n {
		return nil, errSingular
	}
	for k := range n {
		norm := 0.0
		for i := k; i < m; i++ {
			norm = math.Hypot(norm, a[i][k])
		}
		if norm == 0 {
			return nil, errSingular
		}
		if a[k][k] > 0 {
			norm = -norm
		}
		// v = x − norm·e_k, stored in column k below the diagonal
		a[k][k] -= norm
		vv := 0.0
		for i := k; i < m; i++ {
			vv += a[i][k] * a[i][k]
		}
		for j := k + 1; j < n; j++ {
			s := 0.0
			for i := k; i < m; i++ {
				s += a[i][k] * a[i][j]
			}
			s = 2 * s / vv
			for i := k; i < m; i++ {
				a[i][j] -= s * a[i][k]
			}
		}
		s := 0.0
		for i := k; i < m; i++ {
			s += a[i][k] * b[i]
		}
		s = 2 * s / vv
		for i := k; i < m; i++ {
			b[i] -= s * a[i][k]
		}
		a[k][k] = norm // R's diagonal
	}
	theta := make([]float64, n)
	for k := n - 1; k >= 0; k-- {
		s := b[k]
		for j := k + 1; j < n; j++ {
			s -= a[k][j] * theta[j]
		}
		if math.Abs(a[k][k]) < 1e-13*math.Abs(a[0][0]) {
			return nil, errSingular
		}
		theta[k] = s / a[k][k]
	}
	return theta, nil
}
