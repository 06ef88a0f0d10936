package sinkhorn

import (
	"math"
	"slices"

	"barygrid/internal/parallel"
)

// The last stage of a plain balanced barycenter finishes with Newton-Krylov
// steps on the fixed point of the sweep. Over-relaxed sweeps converge at a
// rate that degrades with the grid (797 full-grid iterations at 512^2 on 8
// make_fields inputs): the slow errors are smooth, mass sliding along the
// fields, which a sweep moves by about a pixel. Newton's method on
// g = Phi(g) (Phi: one sweep, log v -> log v) corrects them, with the linear
// systems solved by GMRES (Saad & Schultz 1986) on Jacobian products by
// differences (one sweep each: Knoll & Keyes, J. Comput. Phys. 193, 2004,
// Jacobian-free Newton-Krylov), preconditioned by a model of the linearised
// sweep on smooth errors:
//
//	(I - Phi') d ~ (T_k d_k - sum_l w_l T_l d_l)_k,  T_k = -(1/2b) div(b S_k grad),
//
// S_k the two-step covariance of plan k on the barycenter's side (b -> a_k
// -> b), read from the plan's conditional moments (precond.go). The
// preconditioner solves b T_k d_k = b (r_k - rbar) per input by multigrid
// and projects onto sum_k w_k d_k = 0, then adds r for the rough errors,
// which a sweep damps at once. The numpy prototype
// bench/prototypes/newton_sweeps.py measured the model first (DEVELOPERS.md).
//
// Far from the solution Newton steps wander, so the stage starts with
// over-relaxed sweeps, hands over below newtonStart, and first takes
// preSweeps plain sweeps; every step is safeguarded (the step, its half or
// its quarter, whichever lowers the merit, else plain sweeps) and followed
// by one plain sweep. Everything is counted in full-grid iterations of
// kernel work: a Jacobian product is one, evaluating a trial point (a sweep
// and the residual's K v) two, building the preconditioner
// precondIterations.
//
// Measured on 8 make_fields inputs at epsilon 1 px^2, tol 1e-6 (seeds 2, 3,
// 4): 64-71 full-grid iterations at 128^2 to 256^2 and 80 at 512^2,
// against 239-465 and 797 with the sweeps alone; on the benchmark shapes
// (thin rings and crescents) 65 / 65 / 82 at 128 / 192 / 256^2 against
// 143 / 185 / 223.

const (
	// newtonStart: the residual below which the last stage hands over.
	newtonStart = 2e-2
	// preSweeps: plain sweeps at the hand-over. They settle the far tails
	// of the potentials, which the model misses; without them a first
	// step there could wreck the tails (benchmark shapes at 256^2: 1610
	// full-grid iterations instead of 82, see DEVELOPERS.md).
	preSweeps = 10
	// krylovDim is GMRES's restart length m: m + 1 vectors of K n.
	krylovDim = 10
	// newtonVectors is about the memory of the phase in grids of K n
	// float64s: the Krylov vectors, four more, the multigrid hierarchy
	// and the build's moments (measured at 8 x 512^2: a peak of 1.33-1.38
	// GB against the sweeps' 555 MB, 46-49 such grids).
	newtonVectors = krylovDim + 1 + 4 + 38
	// newtonBytes bounds that memory; larger problems keep the sweeps
	// (8 inputs of 512^2 take about 890 MB; 32 would take 3.6 GB).
	newtonBytes = 1 << 30
	// fallbackSweeps: plain sweeps after a step that failed every trial;
	// pauseAfterFail relaxed ones follow before the next step.
	fallbackSweeps = 10
	pauseAfterFail = 2 * fallbackSweeps
	// vCycles per inner solve (W-cycles; precond.go).
	vCycles = 1
	// precondIterations: the build takes sixteen kernel applications per
	// input (linear ones through the absorbed windows where they exist),
	// counted as eight sweeps.
	precondIterations = 8
	// bFloor: b is floored at this fraction of its peak in the model, so
	// that the Laplacians stay connected where b is negligible.
	bFloor = 1e-3
	// fdStep: the difference step of a Jacobian product, against the
	// largest |z| (273 full-grid iterations at 1e-5 against 3240 at 1e-7
	// on the benchmark shapes before the gauge and the pre-sweeps).
	fdStep = 1e-5
	// maxStep: a step that changes a log-scaling by more (after the
	// gauge) is a breakdown; the kernels need finite input. Steps of up
	// to 441 were needed at 512^2.
	maxStep = 1e4
	// stepIterations bounds the kernel work of one step.
	stepIterations = 2 + precondIterations + krylovDim + 3*2 + 2 + fallbackSweeps + 1
)

// newton is the Newton-Krylov phase of a logIter.
type newton struct {
	st    *logIter
	K, n  int
	w     []float64
	base  [][]float64 // the current iterate, log v
	phi   [][]float64 // Phi(base)
	r     float64     // the driver's residual at (F(base), Phi(base))
	merit float64     // |Phi(base) - base| in the weighted norm; -1: not yet
	pre   bool        // the plain sweeps at the hand-over are done
	have  bool        // base and phi are current
	v     [][][]float64
	z, x  [][]float64 // scratch
	pc    *precond
	wt    []float64 // weights of the inner product: (b / max b)^2
	pause int       // sweeps left before the next Newton step
	steps int       // Newton steps taken
	tried int       // Newton steps attempted, taken or not
	// track holds the residual and the phase's iterations after each
	// step, for stalled.
	track [][2]float64
	spent int
}

// stallRate: the Newton phase gives up when its last two steps gained
// less than this many decades of the residual per iteration. The
// over-relaxed sweeps it replaces gain 0.005 (512^2) to 0.02 (128^2); on
// the benchmark shapes at tol 1e-9 the steps crept from 8e-7 at 0.0003
// (35272 full-grid iterations before this rule).
const stallRate = 0.01

// stalled records a step's outcome and reports whether the phase should
// end, handing the stage back to the sweeps.
func (nw *newton) stalled(r float64, used int) bool {
	nw.spent += used
	nw.track = append(nw.track, [2]float64{r, float64(nw.spent)})
	n := len(nw.track)
	if n < 3 {
		return false
	}
	a, b := nw.track[n-3], nw.track[n-1]
	rate := math.Log10(a[0]/b[0]) / (b[1] - a[1])
	return rate < max(stallRate, 0.8*sweepRate(nw.st.k))
}

// sweepRate is about the pace of over-relaxed sweeps in decades of the
// residual per iteration: 3 over the grid's side in units of the kernel's
// width sqrt(epsilon) (measured on make_fields at epsilon 1 px^2: 0.05,
// 0.027, 0.015 and 0.0054 at 64, 128, 256 and 512 pixels a side).
func sweepRate(k *logKernel) float64 {
	return 3 / math.Sqrt(float64(k.rows*k.cols)*math.Sqrt(k.cx*k.cy))
}

// newtonFor returns the Newton phase for a stage, or nil where it does not
// apply: only the last stage of a plain balanced barycenter without a mask,
// in the log domain, with the relaxation left to the solver, and memory
// for the phase.
func (rn *run) newtonFor(it iteration, lv *level, final bool) *newton {
	p := rn.p
	st, ok := it.(*logIter)
	if !ok || !final || p.noNewton || p.relax != 0 || p.debias || p.rho != 0 || p.target != nil ||
		p.symmetric || p.product || lv.mask != nil || st.mode != nil || st.lam != 1 || len(lv.a) < 2 {
		return nil
	}
	K := len(lv.a)
	if newtonMemory(K, lv.n) == 0 {
		return nil
	}
	alloc := func() [][]float64 {
		x := make([][]float64, K)
		for k := range x {
			x[k] = make([]float64, lv.n)
		}
		return x
	}
	nw := &newton{st: st, K: K, n: lv.n, w: p.w, base: alloc(), phi: alloc(), z: alloc(), x: alloc()}
	for range krylovDim + 1 {
		nw.v = append(nw.v, alloc())
	}
	return nw
}

// ready reports whether the next iteration should be a Newton step, with
// left iterations of the budget.
func (nw *newton) ready(r float64, left int) bool {
	if nw.pause > 0 {
		nw.pause--
		return false
	}
	return r <= newtonStart && left >= stepIterations
}

// reset forgets Phi(base): a sweep moved on, or the kernels changed.
func (nw *newton) reset() { nw.have = false }

// evaluate sets the iteration's state to (F(x), Phi(x)), with K v and the
// residual of that state, the way a sweep leaves it, and returns the
// residual.
func (nw *newton) evaluate(x [][]float64) float64 {
	st := nw.st
	st.phiOf(x, st.G)
	return st.finish()
}

// step takes one safeguarded Newton step from the iteration's current
// state (at the first call, the plain sweeps of the hand-over instead). It
// returns the new residual and the iterations of kernel work it took; ok
// is false when no trial lowered the merit (the iteration then went on
// with plain sweeps).
func (nw *newton) step() (r float64, used int, ok bool) {
	st := nw.st
	if !nw.pre {
		nw.pre = true
		for range preSweeps {
			r = st.step(1)
			used++
		}
		nw.have = false
		return r, used, true
	}
	if !nw.have {
		copy2(nw.base, st.G)
		nw.r = nw.evaluate(nw.base)
		copy2(nw.phi, st.G)
		nw.have = true
		used += 2
		nw.merit = -1
	}
	if nw.pc == nil {
		// Built once, at the first step: rebuilding it later measured no
		// gain.
		peak := slices.Max(st.lb)
		nw.wt = make([]float64, nw.n)
		for i, x := range st.lb {
			nw.wt[i] = math.Exp(2 * (x - peak))
		}
		nw.pc = newPrecond(st, nw.base)
		used += precondIterations
	}
	if nw.merit < 0 {
		nw.merit = nw.meritOf(nw.phi, nw.base)
	}
	nw.tried++
	// GMRES on (I - Phi') d = Phi(base) - base, right-preconditioned.
	d, products := nw.gmres()
	used += products
	nw.gauge(d)
	if nw.bounded(d) {
		for _, t := range []float64{1, 0.5, 0.25} {
			parallel.For(nw.K, st.p.workers, func(k int) {
				for i, b := range nw.base[k] {
					nw.x[k][i] = b + t*d[k][i]
				}
			})
			rt := nw.evaluate(nw.x)
			used += 2
			mt := nw.meritOf(st.G, nw.x)
			// The merit weighs the bulk, where the model holds; the L1
			// residual may grow for a while as the tails catch up.
			if mt < nw.merit && rt < 100*nw.r && !math.IsNaN(rt) && !math.IsNaN(mt) {
				copy2(nw.base, nw.x)
				copy2(nw.phi, st.G)
				nw.r, nw.merit = rt, mt
				nw.steps++
				// st holds (F(x), Phi(x)) with K v: one plain sweep on from
				// there damps what the step roughened.
				rt = st.step(1)
				used++
				nw.have = false
				return rt, used, true
			}
		}
	}
	// No trial helped: back to the base's state, then plain sweeps.
	r = nw.evaluate(nw.base)
	used += 2
	for range fallbackSweeps {
		r = st.step(1)
		used++
	}
	nw.have = false
	return r, used, false
}

// gmres runs GMRES(m) from zero on (I - Phi') d = Phi(base) - base, with
// the preconditioner on the right (d = M y), and returns d and the
// Jacobian products it took. It stops early once its residual estimate is
// below 1e-3 of the start.
func (nw *newton) gmres() ([][]float64, int) {
	st := nw.st
	m := krylovDim
	v0 := nw.v[0]
	for k := range v0 {
		for i := range v0[k] {
			v0[k][i] = nw.phi[k][i] - nw.base[k][i]
		}
	}
	beta := math.Sqrt(nw.dot(v0, v0))
	if beta == 0 || math.IsNaN(beta) {
		clear2(nw.x)
		return nw.x, 0
	}
	scale2(v0, 1/beta)
	h := make([][]float64, m+1)
	for i := range h {
		h[i] = make([]float64, m)
	}
	cs, sn := make([]float64, m), make([]float64, m)
	gv := make([]float64, m+1)
	gv[0] = beta
	j := 0
	for ; j < m; j++ {
		nw.pc.apply(nw.z, nw.v[j], nw.w, st.p.workers)
		// A z = z - (Phi(base + e z) - Phi(base)) / e, e small against z.
		zm := make([]float64, nw.K)
		parallel.For(nw.K, st.p.workers, func(k int) {
			m := 0.0
			for _, x := range nw.z[k] {
				m = math.Max(m, math.Abs(x))
			}
			zm[k] = m
		})
		zmax := slices.Max(zm)
		if zmax == 0 || math.IsNaN(zmax) {
			break // nothing to difference along: keep the basis so far
		}
		e := fdStep / zmax
		parallel.For(nw.K, st.p.workers, func(k int) {
			for i, b := range nw.base[k] {
				nw.x[k][i] = b + e*nw.z[k][i]
			}
		})
		w := nw.v[j+1]
		st.phiOf(nw.x, w)
		parallel.For(nw.K, st.p.workers, func(k int) {
			for i := range w[k] {
				w[k][i] = nw.z[k][i] - (w[k][i]-nw.phi[k][i])/e
			}
		})
		nw.orthogonalise(w, j, h)
		// Givens rotations keep the residual estimate |gv[j+1]|.
		for i := 0; i < j; i++ {
			a, b := h[i][j], h[i+1][j]
			h[i][j], h[i+1][j] = cs[i]*a+sn[i]*b, -sn[i]*a+cs[i]*b
		}
		den := math.Hypot(h[j][j], h[j+1][j])
		if den == 0 {
			break
		}
		cs[j], sn[j] = h[j][j]/den, h[j+1][j]/den
		h[j][j], gv[j+1] = den, -sn[j]*gv[j]
		gv[j] *= cs[j]
		if h[j+1][j] != 0 {
			scale2(w, 1/h[j+1][j])
		}
		h[j+1][j] = 0
		if math.Abs(gv[j+1]) <= 1e-3*beta || math.IsNaN(gv[j+1]) {
			j++
			break
		}
	}
	// Back substitution, then d = M (V y).
	y := make([]float64, j)
	for i := j - 1; i >= 0; i-- {
		s := gv[i]
		for l := i + 1; l < j; l++ {
			s -= h[i][l] * y[l]
		}
		y[i] = s / h[i][i]
	}
	clear2(nw.x)
	for i := range y {
		axpy2(nw.x, y[i], nw.v[i], st.p.workers)
	}
	nw.pc.apply(nw.z, nw.x, nw.w, st.p.workers)
	return nw.z, j
}

// orthogonalise makes w orthogonal to v[0..j] in the weighted product,
// writing the coefficients to h[0..j][j] and w's norm after to h[j+1][j].
// It takes classical Gram-Schmidt twice (CGS2): one pass loses
// orthogonality with the square of the basis' condition (Giraud, Langou,
// Rozloznik 2005), the second restores it, and each pass reads the basis
// once, where modified Gram-Schmidt reads it twice per vector.
func (nw *newton) orthogonalise(w [][]float64, j int, h [][]float64) {
	g := make([]float64, j+1)
	for i := 0; i <= j; i++ {
		h[i][j] = 0
	}
	for range 2 {
		h[j+1][j] = nw.cgs(w, j, g)
		for i, x := range g {
			h[i][j] += x
		}
	}
}

// cgs is one classical Gram-Schmidt pass: g gets w's products with
// v[0..j], w loses its components along them, and its norm after is
// returned. Partial sums per input are added in input order (the same bits
// for any number of workers).
func (nw *newton) cgs(w [][]float64, j int, g []float64) float64 {
	workers := nw.st.p.workers
	part := make([][]float64, nw.K)
	parallel.For(nw.K, workers, func(k int) {
		part[k] = make([]float64, j+1)
		for i := 0; i <= j; i++ {
			s, vi := 0.0, nw.v[i][k]
			for l, x := range w[k] {
				s += nw.wt[l] * x * vi[l]
			}
			part[k][i] = s
		}
	})
	for i := range g {
		g[i] = 0
		for k := range part {
			g[i] += part[k][i]
		}
	}
	return math.Sqrt(nw.sumInputs(func(k int) float64 {
		wk := w[k]
		for i, c := range g {
			vi := nw.v[i][k]
			for l := range wk {
				wk[l] -= c * vi[l]
			}
		}
		s := 0.0
		for l, x := range wk {
			s += nw.wt[l] * x * x
		}
		return s
	}))
}

// bounded reports whether every entry of d is within maxStep (NaN is not).
func (nw *newton) bounded(d [][]float64) bool {
	for k := range d {
		for _, x := range d[k] {
			if !(math.Abs(x) <= maxStep) {
				return false
			}
		}
	}
	return true
}

// gauge removes from a step d its part in the null space of I - Phi':
// constants c_k per input with sum_k w_k c_k = 0 (Phi(g + c) = Phi(g) + c;
// they leave every plan as it is). Each d_k keeps the b-weighted mean of
// sum_k w_k d_k only, so that the step's size measures a change of the
// plans (GMRES left constants of several hundred in d at 256^2).
func (nw *newton) gauge(d [][]float64) {
	st := nw.st
	m := make([]float64, nw.K)
	parallel.For(nw.K, st.p.workers, func(k int) {
		s, sb := 0.0, 0.0
		for i, b := range nw.pc.b { // b at the build: any positive weights do
			s += b * d[k][i]
			sb += b
		}
		m[k] = s / sb
	})
	mbar := 0.0
	for k, w := range nw.w {
		mbar += w * m[k]
	}
	parallel.For(nw.K, st.p.workers, func(k int) {
		c := m[k] - mbar
		for i := range d[k] {
			d[k][i] -= c
		}
	})
}

// sumInputs returns the sum over inputs of f(k), computed in parallel and
// added in input order (the same bits for any number of workers).
func (nw *newton) sumInputs(f func(k int) float64) float64 {
	part := make([]float64, nw.K)
	parallel.For(nw.K, nw.st.p.workers, func(k int) { part[k] = f(k) })
	s := 0.0
	for _, x := range part {
		s += x
	}
	return s
}

// dot is the weighted product over all inputs.
func (nw *newton) dot(a, b [][]float64) float64 {
	return nw.sumInputs(func(k int) float64 {
		s := 0.0
		for i, x := range a[k] {
			s += nw.wt[i] * x * b[k][i]
		}
		return s
	})
}

// meritOf is |a - b| in the weighted norm.
func (nw *newton) meritOf(a, b [][]float64) float64 {
	return math.Sqrt(nw.sumInputs(func(k int) float64 {
		s := 0.0
		for i, x := range a[k] {
			d := x - b[k][i]
			s += nw.wt[i] * d * d
		}
		return s
	}))
}

func copy2(dst, src [][]float64) {
	for k := range dst {
		copy(dst[k], src[k])
	}
}

func clear2(x [][]float64) {
	for k := range x {
		clear(x[k])
	}
}

func scale2(x [][]float64, a float64) {
	for k := range x {
		for i := range x[k] {
			x[k][i] *= a
		}
	}
}

func axpy2(y [][]float64, a float64, x [][]float64, workers int) {
	parallel.For(len(y), workers, func(k int) {
		for i, v := range x[k] {
			y[k][i] += a * v
		}
	})
}

// phiOf writes one sweep of x to out: F_k = log a_k - LK x_k, log b =
// sum_k w_k LK F_k, out_k = log b - LK F_k (plain balanced only). It leaves
// F, LKu and log b of x in the iteration; out may be G.
func (st *logIter) phiOf(x, out [][]float64) {
	p, lv := st.p, st.lv
	K := len(lv.a)
	parallel.For(K, p.workers, func(k int) {
		st.conv(k, st.LKv[k], x[k], k)
		relaxLog(st.F[k], lv.la[k], st.LKv[k], 1, false)
		st.conv(K+k, st.LKu[k], st.F[k], k)
	})
	parallel.For((lv.n+chunk-1)/chunk, p.workers, st.sumLogB)
	parallel.For(K, p.workers, func(k int) {
		relaxLog(out[k], st.lb, st.LKu[k], 1, true)
	})
}

// finish computes K v from G and the residual of (F, G), as the end of a
// sweep does.
func (st *logIter) finish() float64 {
	p, lv := st.p, st.lv
	parallel.For(len(lv.a), p.workers, func(k int) {
		st.conv(k, st.LKv[k], st.G[k], k)
		st.resid[k] = marginalL1(st.F[k], st.LKv[k], lv.a[k]) / lv.mass[k]
	})
	return slices.Max(st.resid)
}
