package memmap

import "math"

// The model of the learned points, in the reference state (drift taken out), with x = u·(1+ε):
//
//   - a global model p = β0 + β1·z (+ β2·z²), z = (x − xc)/xs, fitted by weighted least squares;
//     the quadratic term only when enough points span a wide range;
//   - local residuals from it, interpolated between the two neighbouring points as an
//     Ornstein–Uhlenbeck process in x: with a correlation length of Reach steps, the
//     interpolation is close to linear between close neighbours and decays to zero (the global
//     model alone) far from any point. The process is Markov, so the two neighbours are all the
//     points that matter, which keeps a prediction cheap.
//
// The residuals' variance τ² is estimated from their scatter beyond the position noise, pulled
// towards the prior Bend (as the map's errors have scaled it, calib.go) with the weight of
// benchNu observations, so that a map of two or three points is not trusted as if it had shown
// the capacitor to be straight.

const (
	// benchNu is how many residuals' worth of weight the prior Bend has in τ².
	benchNu = 1
	// quadSpan is the smallest ratio of largest to smallest u (a frequency ratio of √2) over
	// which the global model may bend.
	quadSpan = 2
	// fitPasses is how often the fit and τ² are refined together: the weights depend on τ².
	fitPasses = 3
)

type model struct {
	k      int // basis terms: 0 (no fit), 2 or 3
	xc, xs float64
	beta   [3]float64
	cov    mat // of beta; only the leading k×k is used
	tau2   float64
	reach  float64 // correlation length, in x
	pbar   mat     // mean covariance of the points' placement errors
	cbar   mat     // mean cross-covariance of those with the drift estimate's
}

func (fm *model) eval(x float64) (g, dg, vg float64) {
	z := (x - fm.xc) / fm.xs
	phi := [3]float64{1, z, z * z}
	for i := range fm.k {
		g += fm.beta[i] * phi[i]
		for j := range fm.k {
			vg += phi[i] * fm.cov[i][j] * phi[j]
		}
	}
	dg = fm.beta[1]
	if fm.k == 3 {
		dg += 2 * fm.beta[2] * z
	}
	return g, dg / fm.xs, math.Max(vg, 0)
}

// refit rebuilds the model from the entries. It runs after every change of the points.
func (m *Map) refit() {
	ents := m.ents
	n := len(ents)
	fm := model{}
	for i := range ents {
		for a := range ns {
			for b := range ns {
				fm.pbar[a][b] += ents[i].p[a][b] / float64(n)
				fm.cbar[a][b] += ents[i].c[a][b] / float64(n)
			}
		}
	}
	if n < 2 {
		m.fit = fm
		return
	}
	xmin, xmax := ents[0].x, ents[n-1].x
	fm.k = 2
	quad := m.o.quadMin > 0 && n >= m.o.quadMin && xmax >= quadSpan*xmin
	for i := range ents {
		fm.xc += ents[i].x / float64(n)
	}
	fm.xs = (xmax - xmin) / 2
	if !(fm.xs > 1e-12*math.Abs(fm.xc)) {
		fm.xs = 1e-12*math.Abs(fm.xc) + math.SmallestNonzeroFloat64
	}
	tau2, bend2 := 0.0, 0.0
	pv := m.posVar()
	for pass := range fitPasses {
		m.multiplicity(fm.reach, tau2)
		if !fm.solve(ents, tau2+pv) {
			// A quadratic the points cannot carry falls back to the straight line.
			fm.k = 2
			if !fm.solve(ents, tau2+pv) {
				m.fit = model{pbar: fm.pbar, cbar: fm.cbar}
				return
			}
		}
		var ss, neff float64
		for i := range ents {
			g, _, _ := fm.eval(ents[i].x)
			ents[i].r = ents[i].yref - g
			ss += ents[i].r * ents[i].r / ents[i].mult
			neff += 1 / ents[i].mult
		}
		if pass == 0 {
			// The scales come from the first, unweighted, fit: the position-equivalent of the
			// largest capacitance, x·dp/dx at the largest x.
			_, dg, _ := fm.eval(xmax)
			hmax := math.Abs(xmax * dg)
			bend := m.o.bend
			if bend == 0 {
				bend = defaultBendShare * hmax
			}
			// Bend is a guess, and the map's errors say how far off it is (calib): the
			// prediction of a band not yet learned, made from the others, is nearly all law
			// and tests the bends between bands directly; errors beside the points test only
			// the law's smoothness there, and do not move it (outcome.far). The guess so
			// scaled is what the points' own scatter is pooled with.
			bend2 = m.cal.scale(cShape) * bend * bend
			reach := m.o.reach
			if reach == 0 {
				reach = defaultReachShare * hmax
			}
			_, dgc, _ := fm.eval(fm.xc)
			fm.reach = math.Max(reach/math.Max(math.Abs(dgc), 1e-300), 1e-12*math.Abs(fm.xc))
		}
		dof := math.Max(neff-float64(fm.k), 0)
		excess := math.Max(ss-dof*pv, 0)
		tau2 = (benchNu*bend2 + excess) / (benchNu + dof)
		if pass == 0 && quad {
			// A bend of the global model needs points that tell it from the residuals': as
			// many independent ones as QuadMinPoints asks, a cluster of close points counting
			// about once (they share one local deviation). Six points learned in two bands
			// are two such, and a quadratic through them is a guess whose uncertainty would
			// swamp every extrapolation beyond them.
			m.multiplicity(fm.reach, tau2)
			var n float64
			for i := range ents {
				n += 1 / ents[i].mult
			}
			if n >= float64(m.o.quadMin) {
				fm.k = 3
			}
		}
	}
	fm.tau2 = tau2
	m.fit = fm
}

// solve fits beta by weighted least squares, every point with variance v shared among the
// points it is correlated with, and sets cov. It reports false if the normal equations are
// singular.
func (fm *model) solve(ents []entry, v float64) bool {
	k := fm.k
	var a mat
	var c [3]float64
	for i := range ents {
		z := (ents[i].x - fm.xc) / fm.xs
		phi := [3]float64{1, z, z * z}
		w := 1 / (v * ents[i].mult)
		for r := range k {
			c[r] += phi[r] * ents[i].yref * w
			for s := range k {
				a[r][s] += phi[r] * phi[s] * w
			}
		}
	}
	inv, ok := invertSPD(a, k)
	if !ok {
		return false
	}
	fm.cov = inv
	fm.beta = [3]float64{}
	for r := range k {
		for s := range k {
			fm.beta[r] += inv[r][s] * c[s]
		}
	}
	return true
}

// invertSPD inverts the leading k×k block of a symmetric positive-definite matrix through its
// Cholesky factor; false if it is not (numerically) positive definite.
func invertSPD(a mat, k int) (mat, bool) {
	var l mat
	for i := range k {
		for j := 0; j <= i; j++ {
			s := a[i][j]
			for p := range j {
				s -= l[i][p] * l[j][p]
			}
			if i == j {
				if !(s > 1e-13*a[i][i]) || !(s > 0) {
					return mat{}, false
				}
				l[i][i] = math.Sqrt(s)
			} else {
				l[i][j] = s / l[j][j]
			}
		}
	}
	// inv(L), lower triangular.
	var li mat
	for i := range k {
		li[i][i] = 1 / l[i][i]
		for j := range i {
			var s float64
			for p := j; p < i; p++ {
				s -= l[i][p] * li[p][j]
			}
			li[i][j] = s / l[i][i]
		}
	}
	var inv mat
	for i := range k {
		for j := range k {
			var s float64
			for p := max(i, j); p < k; p++ {
				s += li[p][i] * li[p][j]
			}
			inv[i][j] = s
		}
	}
	return inv, true
}

// nbrs are the entries either side of a query and how near each is, as the weights a noiseless
// interpolation would give them (1 at the point itself, decaying with distance).
type nbrs struct {
	l, r   int // −1: none
	wl, wr float64
	cl, cr float64 // the weights of their residuals in the interpolated one
}

// corr is the correlation of the local deviations at two places d apart in x: a squared
// exponential, because a capacitor's law is smooth, so that the deviation a learned point leaves
// unknown grows in proportion to the distance from it.
func (fm *model) corr(d float64) float64 {
	d /= fm.reach
	return math.Exp(-d * d / 2)
}

// residual returns the interpolated local deviation from the global model at x, its variance,
// the part of that variance that is the neighbours' position noise passed on (the rest is the
// law's own deviation between and beyond them), and the neighbours.
func (m *Map) residual(x float64) (mean, vr, vn float64, nb nbrs) {
	fm := &m.fit
	tau2, v := fm.tau2, m.posVar()
	nb.l = m.around(x)
	nb.r = nb.l + 1
	if nb.r >= len(m.ents) {
		nb.r = -1
	}
	switch {
	case nb.l >= 0 && nb.r >= 0:
		el, er := &m.ents[nb.l], &m.ents[nb.r]
		al, ar := fm.corr(x-el.x), fm.corr(er.x-x)
		alr := fm.corr(er.x - el.x)
		if d := 1 - alr*alr; d > 1e-12 {
			nb.wl = math.Max((al-alr*ar)/d, 0)
			nb.wr = math.Max((ar-alr*al)/d, 0)
			if s := nb.wl + nb.wr; s > 1 {
				nb.wl, nb.wr = nb.wl/s, nb.wr/s
			}
		} else if x-el.x < er.x-x {
			nb.wl = al
		} else {
			nb.wr = ar
		}
		a11, a12 := tau2+v, tau2*alr
		kl, kr := tau2*al, tau2*ar
		det := a11*a11 - a12*a12
		cl := (a11*kl - a12*kr) / det
		cr := (a11*kr - a12*kl) / det
		mean = cl*el.r + cr*er.r
		vr = tau2 - cl*kl - cr*kr
		vn = v * (cl*cl + cr*cr)
		nb.cl, nb.cr = cl, cr
	case nb.l >= 0 || nb.r >= 0:
		j := nb.l
		if j < 0 {
			j = nb.r
		}
		e := &m.ents[j]
		a := fm.corr(x - e.x)
		c := tau2 * a / (tau2 + v)
		if j == nb.l {
			nb.wl, nb.cl = a, c
		} else {
			nb.wr, nb.cr = a, c
		}
		mean = c * e.r
		vr = tau2 - c*tau2*a
		vn = v * c * c
	default:
		vr = tau2
	}
	vr = math.Max(vr, 0)
	vn = math.Min(vn, vr)
	return mean, vr, vn, nb
}

// residualWithout is the local deviation at x interpolated from the neighbours of entry skip
// either side of it, as if it had not been learned, and its variance.
func (m *Map) residualWithout(x float64, skip int) (mean, vr float64) {
	fm := &m.fit
	tau2, v := fm.tau2, m.posVar()
	l, r := skip-1, skip+1
	switch {
	case l >= 0 && r < len(m.ents):
		el, er := &m.ents[l], &m.ents[r]
		al, ar := fm.corr(x-el.x), fm.corr(er.x-x)
		alr := fm.corr(er.x - el.x)
		a11, a12 := tau2+v, tau2*alr
		kl, kr := tau2*al, tau2*ar
		det := a11*a11 - a12*a12
		if !(det > 0) {
			return 0, tau2
		}
		cl := (a11*kl - a12*kr) / det
		cr := (a11*kr - a12*kl) / det
		return cl*el.r + cr*er.r, math.Max(tau2-cl*kl-cr*kr, 0)
	case l >= 0 || r < len(m.ents):
		j := l
		if j < 0 {
			j = r
		}
		e := &m.ents[j]
		a := fm.corr(x - e.x)
		c := tau2 * a / (tau2 + v)
		return c * e.r, math.Max(tau2-c*tau2*a, 0)
	}
	return 0, tau2
}

// meanAt returns the model's position at x in the reference state, its variance, and the
// neighbours. The global model's uncertainty enters as in universal kriging: through the basis
// at x less the basis at the neighbours as their residuals are weighted, because an error of
// the global model at a learned point is taken up by that point's residual. Near a point that
// the residuals follow, the global model's error cancels; where they are mostly noise, it stays.
//
// The variance comes in two parts: vs, from the law's deviation (τ²), and vn, from the learned
// positions' noise, so that the map's errors can tell which of the two its options misjudged.
func (m *Map) meanAt(x float64) (mean, vs, vn float64, nb nbrs) {
	fm := &m.fit
	g, _, _ := fm.eval(x)
	r, rv, rn, nb := m.residual(x)
	phi := fm.basis(x)
	if nb.l >= 0 && nb.cl != 0 {
		pl := fm.basis(m.ents[nb.l].x)
		for i := range phi {
			phi[i] -= nb.cl * pl[i]
		}
	}
	if nb.r >= 0 && nb.cr != 0 {
		pr := fm.basis(m.ents[nb.r].x)
		for i := range phi {
			phi[i] -= nb.cr * pr[i]
		}
	}
	var gv float64
	for i := range fm.k {
		for j := range fm.k {
			gv += phi[i] * fm.cov[i][j] * phi[j]
		}
	}
	// The fit weighs every point by τ² + the position variance: its uncertainty is theirs in
	// that proportion.
	gv = math.Max(gv, 0)
	gn := 0.0
	if t := fm.tau2 + m.posVar(); t > 0 {
		gn = gv * m.posVar() / t
	}
	return g + r, gv - gn + rv - rn, gn + rn, nb
}

func (fm *model) basis(x float64) [3]float64 {
	z := (x - fm.xc) / fm.xs
	return [3]float64{1, z, z * z}
}

// mean returns the model's position at x in the reference state.
func (m *Map) mean(x float64) float64 {
	g, _, _ := m.fit.eval(x)
	r, _, _, _ := m.residual(x)
	return g + r
}

// multiplicity sets each entry's mult: how many points' worth of the same local deviation it
// shares with its neighbours, 1 + Σ over the others of their correlation with it. Points learned
// close together see the same bend of the capacitor and the same drift, so a cluster of them
// counts about once in the global fit, not once per point; without this, a map learned in a few
// bands would claim to know the bends between them. The kernel is exponential, so the sums
// over the points to either side follow a one-term recursion.
func (m *Map) multiplicity(reach, tau2 float64) {
	ents := m.ents
	c := 0.0
	if tau2 > 0 && reach > 0 {
		c = tau2 / (tau2 + m.posVar())
	}
	for i := range ents {
		ents[i].mult = 1
	}
	if c == 0 {
		return
	}
	s := 0.0
	for i := 1; i < len(ents); i++ {
		s = math.Exp(-(ents[i].x-ents[i-1].x)/reach) * (s + 1)
		ents[i].mult += c * s
	}
	s = 0
	for i := len(ents) - 2; i >= 0; i-- {
		s = math.Exp(-(ents[i+1].x-ents[i].x)/reach) * (s + 1)
		ents[i].mult += c * s
	}
}
