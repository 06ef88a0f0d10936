package sinkhorn

import (
	"math"
	"slices"

	"barygrid/internal/parallel"
)

// precond is the Newton phase's model of I - Phi' on smooth errors (see
// newton.go): per input the weighted Laplacian L_k = div(b S_k grad) / 2 in
// its 9-point form on the pixel grid (Neumann; S_k a full 2 x 2 covariance:
// on the benchmark shapes at 256^2 the cross term halved the full-grid
// iterations), with b floored at bFloor of its peak, solved approximately
// by multigrid.
type precond struct {
	b    []float64  // b / max b at the build
	mg   []*mgLevel // per input, the finest level
	rbar []float64
}

// newPrecond builds the model at the iteration's state: G the current log
// v, F and log b of the sweep from it (phiOf has just run there).
func newPrecond(st *logIter, G [][]float64) *precond {
	p, lv := st.p, st.lv
	K, n := len(lv.a), lv.n
	pc := &precond{b: make([]float64, n), mg: make([]*mgLevel, K), rbar: make([]float64, n)}
	bf := make([]float64, n)
	peak := slices.Max(st.lb)
	for i, x := range st.lb {
		pc.b[i] = math.Exp(x - peak)
		bf[i] = math.Max(pc.b[i], bFloor)
	}
	parallel.For(K, p.workers, func(k int) {
		sr, sc, sx := st.twoStepVariance(k, G[k])
		pc.mg[k] = newMGLevel(lv.rows, lv.cols, bf, sr, sc, sx)
	})
	return pc
}

// twoStepVariance returns, per pixel y of the barycenter's side, the
// covariance (squared pixels: along rows, along columns, and the cross
// term) of y' after one step y -> x -> y' of plan k and its reverse:
//
//	S = E[ Cov(y' | x) + (E[y' | x] - y)(E[y' | x] - y)^T | y ],
//
// from conditional moments of the plan exp(F(x) + G(y)) K(x, y): E[t(y) |
// x] = K(e^G t) / K(e^G), E[t(x) | y] = K(e^F t) / K(e^F), sixteen kernel
// applications. Where the iteration's absorbed instances hold windows
// near G and F (the usual case) they are linear sums of those windows,
// multiply-adds only (2.0 s -> 0.25 s of CPU at 8 x 256^2); elsewhere the
// exact log-domain kernel takes them, with a signed t split into its
// positive and negative parts. Coordinates count from 1 so that their
// logs exist. The variances are differences of second moments: with
// single-precision windows they carry relative errors of about 1e-7 times
// the squared side over the variance, a few percent at most at 512^2,
// which a preconditioner tolerates.
func (st *logIter) twoStepVariance(k int, G []float64) (sr, sc, sx []float64) {
	lv := st.lv
	n, cols := lv.n, lv.cols
	tmp, scr := st.tmp[k], st.scr[k]
	F := st.F[k]
	alloc := func() []float64 { return make([]float64, n) }
	denX, denY, src, out, t := alloc(), alloc(), alloc(), alloc(), alloc()
	coord := func(axis, i int) float64 {
		if axis == 0 {
			return float64(i/cols + 1)
		}
		return float64(i%cols + 1)
	}
	var ey func(dst []float64, axes ...int)
	var ex func(dst, t []float64)
	av, au := st.abs[k], st.abs[len(lv.a)+k]
	var sv, su float64
	okv, oku := false, false
	if av != nil && au != nil {
		sv, okv = av.near(G)
		su, oku = au.near(F)
	}
	if okv && oku {
		// The absorbed instances of the two streams hold the kernel's
		// windows near G and F: moments are ratios of their linear sums,
		// two passes of multiply-adds each instead of an exact kernel.
		eG, eF := alloc(), alloc()
		expShift(eG, G, av.ref, sv)
		expShift(eF, F, au.ref, su)
		av.linear(denX, eG, tmp)
		au.linear(denY, eF, tmp)
		ey = func(dst []float64, axes ...int) {
			for i, e := range eG {
				for _, a := range axes {
					e *= coord(a, i)
				}
				src[i] = e
			}
			av.linear(out, src, tmp)
			for i := range dst {
				dst[i] = out[i] / denX[i]
			}
		}
		ex = func(dst, t []float64) {
			for i, e := range eF {
				src[i] = e * t[i]
			}
			au.linear(out, src, tmp)
			for i := range dst {
				dst[i] = out[i] / denY[i]
			}
		}
	} else {
		st.k.apply(denX, G, tmp, scr)
		st.k.apply(denY, F, tmp, scr)
		// ey returns E[t(y) | x] for t = prod of coordinates axes (logs summed).
		ey = func(dst []float64, axes ...int) {
			for i, g := range G {
				src[i] = g
				for _, a := range axes {
					src[i] += math.Log(coord(a, i))
				}
			}
			st.k.apply(out, src, tmp, scr)
			for i := range dst {
				dst[i] = math.Exp(out[i] - denX[i])
			}
		}
		// ex returns E[t(x) | y] for t >= 0, into dst.
		ex = func(dst, t []float64) {
			for i, f := range F {
				src[i] = f + math.Log(t[i])
			}
			st.k.apply(out, src, tmp, scr)
			for i := range out {
				dst[i] = math.Exp(out[i] - denY[i])
			}
		}
	}
	R := [2][]float64{alloc(), alloc()}
	ER := [2][]float64{alloc(), alloc()} // E[R_axis(x) | y]
	S := [3][]float64{alloc(), alloc(), alloc()}
	e := alloc()
	for axis := range 2 {
		ey(R[axis], axis)
		ey(t, axis, axis)
		for i := range t {
			t[i] = math.Max(t[i]-R[axis][i]*R[axis][i], 1e-300)
		}
		s := S[axis]
		ex(s, t)
		for i, r := range R[axis] {
			t[i] = r * r
		}
		ex(e, t)
		ex(ER[axis], R[axis])
		for i := range s {
			c := coord(axis, i)
			s[i] = math.Max(s[i]+e[i]+c*c-2*c*ER[axis][i], 1e-6)
		}
	}
	// The cross term: E[Cov_rc | y] + E[R_r R_c | y] - c_r E[R_c | y] - c_c E[R_r | y] + c_r c_c.
	ey(t, 0, 1)
	neg := alloc()
	for i := range t {
		c := t[i] - R[0][i]*R[1][i]
		t[i], neg[i] = math.Max(c, 1e-300), math.Max(-c, 1e-300)
	}
	x := S[2]
	ex(x, t)
	ex(e, neg)
	for i := range x {
		x[i] -= e[i]
		t[i] = R[0][i] * R[1][i]
	}
	ex(e, t)
	for i := range x {
		cr, cc := coord(0, i), coord(1, i)
		x[i] += e[i] + cr*cc - cr*ER[1][i] - cc*ER[0][i]
	}
	return S[0], S[1], S[2]
}

// apply writes the preconditioned vector of r to out (not r): d_k solves
// L_k d_k = b (r_k - rbar) approximately (vCycles W-cycles from zero;
// the same linear map every time), d is projected onto sum_k w_k d_k = 0,
// and r is added back. The right-hand side is built in out, which the
// multigrid reads before it writes.
func (pc *precond) apply(out, r [][]float64, w []float64, workers int) {
	clear(pc.rbar)
	for k, wk := range w {
		for i, x := range r[k] {
			pc.rbar[i] += wk * x
		}
	}
	parallel.For(len(r), workers, func(k int) {
		m := pc.mg[k]
		f, x := out[k], out[k]
		mean := 0.0
		for i, b := range pc.b {
			f[i] = b * (r[k][i] - pc.rbar[i])
			mean += f[i]
		}
		// Neumann: the right-hand side must sum to zero; constants are
		// the potentials' gauge.
		mean /= float64(len(f))
		for i := range f {
			f[i] -= mean
		}
		m.solve(x, f, vCycles)
		mean = 0
		for _, v := range x {
			mean += v
		}
		mean /= float64(len(x))
		for i := range x {
			x[i] -= mean
		}
	})
	clear(pc.rbar)
	for k, wk := range w {
		for i, x := range out[k] {
			pc.rbar[i] += wk * x
		}
	}
	parallel.For(len(r), workers, func(k int) {
		for i := range out[k] {
			out[k][i] += r[k][i] - pc.rbar[i]
		}
	})
}

// mgLevel is one grid of an aggregation multigrid for a 9-point operator
// (L x)_p = sum_q c_pq (x_p - x_q). Its arrays carry a border of one pixel
// (stride cols + 2) whose couplings are zero, so that the sweeps need no
// bounds tests: c[o][p] couples p with p + off(o), off = 1 (right), s
// (below), s + 1 (below-right), s - 1 (below-left). Coarse grids merge
// 2 x 2 blocks (odd tails form smaller ones) and take the Galerkin operator
// of piecewise-constant prolongation: a coarse coupling is the sum of the
// fine couplings between the two blocks (half of it, the scale of a
// rediscretisation, diverged on real coefficients).
type mgLevel struct {
	rows, cols, s int
	c             [4][]float64
	diag, inv     []float64 // inv: 1 / diag, 0 where diag is
	west          []float64 // c[0][p-1] * inv[p]: the sweep's carried term
	east          []float64 // c[0][p] * inv[p]: the backward sweep's
	five          bool      // no diagonal couplings: the 5-point loops
	f, r, x       []float64 // right-hand side, residual, solution
	coarse        *mgLevel
}

// newMGLevel builds the hierarchy for div(b S grad) / 2 with S = [[sr,
// sx], [sx, sc]] (rows, columns; unpadded arrays). Each pixel's tensor is
// split into non-negative weights on three directions (Selling's
// decomposition; Fehrenbach & Mirebeau, J. Math. Imaging Vision 49, 2014):
// S = (sr - |c|) e_r e_r^T + (sc - |c|) e_c e_c^T + |c| e e^T with c = sx
// clipped to min(sr, sc) and e = e_r + sign(c) e_c, and a coupling takes
// the mean of its two pixels' b-weighted weights along its direction. All
// couplings are then non-negative, so the operator is positive
// semi-definite however the coefficients vary (the mixed-derivative
// stencil it replaces was not, and its multigrid diverged on rough cross
// terms).
func newMGLevel(rows, cols int, b, sr, sc, sx []float64) *mgLevel {
	m := newMGGrid(rows, cols)
	s := m.s
	n := rows * cols
	wr, wc, wd := make([]float64, n), make([]float64, n), make([]float64, n)
	for p := range n {
		c := 0.0
		if sx != nil {
			lim := math.Min(sr[p], sc[p])
			c = math.Max(-lim, math.Min(lim, sx[p]))
		}
		wr[p], wc[p], wd[p] = b[p]*(sr[p]-math.Abs(c)), b[p]*(sc[p]-math.Abs(c)), b[p]*c
	}
	// diag returns pixel p's weight on the diagonal of sign sg.
	diag := func(p int, sg float64) float64 {
		if wd[p]*sg > 0 {
			return math.Abs(wd[p])
		}
		return 0
	}
	for i := range rows {
		for j := range cols {
			p, P := i*cols+j, (i+1)*s+j+1
			if j+1 < cols {
				m.c[0][P] = 0.25 * (wc[p] + wc[p+1])
			}
			if i+1 < rows {
				q := p + cols
				m.c[1][P] = 0.25 * (wr[p] + wr[q])
				if j+1 < cols {
					m.c[2][P] = 0.25 * (diag(p, 1) + diag(q+1, 1))
				}
				if j > 0 {
					m.c[3][P] = 0.25 * (diag(p, -1) + diag(q-1, -1))
				}
			}
		}
	}
	m.finish()
	return m
}

func newMGGrid(rows, cols int) *mgLevel {
	s := cols + 2
	n := (rows + 2) * s
	m := &mgLevel{rows: rows, cols: cols, s: s}
	for o := range m.c {
		m.c[o] = make([]float64, n)
	}
	m.diag, m.inv, m.west, m.east = make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	m.f, m.r, m.x = make([]float64, n), make([]float64, n), make([]float64, n)
	return m
}

// offs returns the index offsets of the four forward couplings.
func (m *mgLevel) offs() [4]int { return [4]int{1, m.s, m.s + 1, m.s - 1} }

// finish fills the diagonal and the sweeps' factors and builds the coarser
// levels.
func (m *mgLevel) finish() {
	rows, cols, s := m.rows, m.cols, m.s
	off := m.offs()
	for o, c := range m.c {
		for p, v := range c {
			if v != 0 {
				m.diag[p] += v
				m.diag[p+off[o]] += v
			}
		}
	}
	for p, d := range m.diag {
		if d != 0 {
			m.inv[p] = 1 / d
			m.west[p] = m.c[0][p-1] * m.inv[p]
			m.east[p] = m.c[0][p] * m.inv[p]
		}
	}
	m.five = !slices.ContainsFunc(m.c[2], func(x float64) bool { return x != 0 }) &&
		!slices.ContainsFunc(m.c[3], func(x float64) bool { return x != 0 })
	if rows <= 3 || cols <= 3 {
		return
	}
	c := newMGGrid((rows+1)/2, (cols+1)/2)
	dirs := [4][2]int{{0, 1}, {1, 0}, {1, 1}, {1, -1}}
	for i := range rows {
		for j := range cols {
			p := (i+1)*s + j + 1
			for o, d := range dirs {
				v := m.c[o][p]
				qi, qj := i+d[0], j+d[1]
				if v == 0 {
					continue
				}
				pi, pj, bi, bj := i/2, j/2, qi/2, qj/2
				if pi == bi && pj == bj {
					continue
				}
				di, dj := bi-pi, bj-pj
				P := (pi+1)*c.s + pj + 1
				if di < 0 || di == 0 && dj < 0 {
					di, dj, P = -di, -dj, (bi+1)*c.s+bj+1
				}
				for co, e := range dirs {
					if e[0] == di && e[1] == dj {
						c.c[co][P] += v
					}
				}
			}
		}
	}
	c.finish()
	m.coarse = c
}

// gs is one Gauss-Seidel sweep on L x = f, forward or backward. The
// neighbour just updated enters last, through one multiply-add (west or
// east): the sweep's chain of dependent operations is that short.
func (m *mgLevel) gs(x, f []float64, backward bool) {
	rows, cols, s := m.rows, m.cols, m.s
	c0, c1, c2, c3, inv, west, east := m.c[0], m.c[1], m.c[2], m.c[3], m.inv, m.west, m.east
	for t := range rows {
		i := t + 1
		if backward {
			i = rows - t
		}
		lo := i * s
		// Rows i-1, i, i+1 of the padded arrays; bounds checks go with them.
		xu, xm, xd := x[lo-s:lo], x[lo:lo+s], x[lo+s:lo+2*s]
		fm, im, wm, em := f[lo:lo+s], inv[lo:lo+s], west[lo:lo+s], east[lo:lo+s]
		eu, em0, sm, su := c0[lo-s:lo], c0[lo:lo+s], c1[lo:lo+s], c1[lo-s:lo]
		_ = eu
		if m.five {
			if !backward {
				for j := 1; j <= cols; j++ {
					a := (fm[j] + sm[j]*xd[j] + su[j]*xu[j] + em0[j]*xm[j+1]) * im[j]
					xm[j] = a + wm[j]*xm[j-1]
				}
			} else {
				for j := cols; j >= 1; j-- {
					a := (fm[j] + sm[j]*xd[j] + su[j]*xu[j] + em0[j-1]*xm[j-1]) * im[j]
					xm[j] = a + em[j]*xm[j+1]
				}
			}
			continue
		}
		dm, du := c2[lo:lo+s], c2[lo-s:lo]
		am, au := c3[lo:lo+s], c3[lo-s:lo]
		if !backward {
			for j := 1; j <= cols; j++ {
				a := fm[j] + sm[j]*xd[j] + su[j]*xu[j] + em0[j]*xm[j+1] +
					dm[j]*xd[j+1] + du[j-1]*xu[j-1] + am[j]*xd[j-1] + au[j+1]*xu[j+1]
				xm[j] = a*im[j] + wm[j]*xm[j-1]
			}
		} else {
			for j := cols; j >= 1; j-- {
				a := fm[j] + sm[j]*xd[j] + su[j]*xu[j] + em0[j-1]*xm[j-1] +
					dm[j]*xd[j+1] + du[j-1]*xu[j-1] + am[j]*xd[j-1] + au[j+1]*xu[j+1]
				xm[j] = a*im[j] + em[j]*xm[j+1]
			}
		}
	}
}

// residual writes f - L x to m.r.
func (m *mgLevel) residual(x, f []float64) {
	rows, cols, s := m.rows, m.cols, m.s
	c0, c1, c2, c3 := m.c[0], m.c[1], m.c[2], m.c[3]
	for i := 1; i <= rows; i++ {
		lo := i * s
		xu, xm, xd := x[lo-s:lo], x[lo:lo+s], x[lo+s:lo+2*s]
		fm, gm, rm := f[lo:lo+s], m.diag[lo:lo+s], m.r[lo:lo+s]
		em, sm, su := c0[lo:lo+s], c1[lo:lo+s], c1[lo-s:lo]
		dm, du, am, au := c2[lo:lo+s], c2[lo-s:lo], c3[lo:lo+s], c3[lo-s:lo]
		for j := 1; j <= cols; j++ {
			a := fm[j] - gm[j]*xm[j] + sm[j]*xd[j] + su[j]*xu[j] + em[j]*xm[j+1] + em[j-1]*xm[j-1]
			if !m.five {
				a += dm[j]*xd[j+1] + du[j-1]*xu[j-1] + am[j]*xd[j-1] + au[j+1]*xu[j+1]
			}
			rm[j] = a
		}
	}
}

// solve writes to x (unpadded) the result of cycles cycles from zero on L x
// = f (unpadded).
func (m *mgLevel) solve(x, f []float64, cycles int) {
	s := m.s
	for i := range m.rows {
		copy(m.f[(i+1)*s+1:], f[i*m.cols:(i+1)*m.cols])
	}
	clear(m.x)
	for range cycles {
		m.vcycle(m.x, m.f)
	}
	for i := range m.rows {
		copy(x[i*m.cols:(i+1)*m.cols], m.x[(i+1)*s+1:])
	}
}

// vcycle improves x for L x = f (padded): a forward sweep, the coarse
// correction, a backward sweep (symmetric); the coarsest grid takes sweeps
// only. The coarse correction takes two cycles of the coarser grid (a
// W-cycle): piecewise-constant aggregation needs them (make_fields at
// 512^2: 166 full-grid iterations with V-cycles, 94 with W-cycles).
func (m *mgLevel) vcycle(x, f []float64) {
	if m.coarse == nil {
		for range 20 {
			m.gs(x, f, false)
			m.gs(x, f, true)
		}
		return
	}
	m.gs(x, f, false)
	m.residual(x, f)
	c := m.coarse
	clear(c.f)
	s, cs := m.s, c.s
	for i := range m.rows {
		cf := c.f[(i/2+1)*cs+1:]
		r := m.r[(i+1)*s+1:]
		for j := range m.cols {
			cf[j/2] += r[j]
		}
	}
	clear(c.x)
	c.vcycle(c.x, c.f)
	if c.coarse != nil {
		c.vcycle(c.x, c.f)
	}
	for i := range m.rows {
		cx := c.x[(i/2+1)*cs+1:]
		xr := x[(i+1)*s+1:]
		for j := range m.cols {
			xr[j] += cx[j/2]
		}
	}
	m.gs(x, f, true)
}
