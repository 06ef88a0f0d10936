package sinkhorn

import (
	"barygrid/internal/parallel"
	"fmt"
	"math"
	"slices"
)

// Scalings outside [tiny, huge] (or a zero K v where an input has mass) mean
// the scaling representation is about to lose digits: exp(+-644) leaves
// room for the products the updates form.
const (
	huge = 1e300
	tiny = 1e-300
)

// initialCutoff sets the first band of the scaling kernel; the periodic
// truncation check widens it when the untruncated kernel disagrees.
// Narrower starts (1e-40, 1e-25) were measured: they save little per
// iteration at epsilon 16 on 128^2 and slow over-relaxation down 4-7x.
const initialCutoff = 1e-80

// scalingIter is the scaling representation: u_k, v_k, b and d as numbers,
// the banded kernel applied with multiply-adds only. It is the cheapest per
// iteration and exact while the scalings stay within the float64 range.
type scalingIter struct {
	p            *problem
	lv           *level
	eps, lam     float64 // epsilon and the KL exponent rho / (rho + eps)
	k            *bandKernel
	u, v, kv, ku [][]float64
	b, d, kd     []float64
	tmp          [][]float64 // one per task
	l            [][]float64 // per chunk: log K u_k at one pixel
	mode         *massMode   // unbalanced barycenters only
	resid        []float64
	full         *bandKernel // untruncated, for verify (built at the first check)
	fullBuf      [][]float64 // scratch for verify
	checks       []float64   // per input: truncation error, untruncated residual
	dres, deq    float64
	bad          []string
	inRng        []bool // per input: step's strict range check passed
	// tr: u and K v are kept transposed (cols x rows), where the kernel
	// would transpose for its pass along x anyway, so that each
	// application takes one transpose instead of two; au holds the inputs
	// in u's layout (lv.a itself when not tr).
	tr         bool
	au         [][]float64
	smooth     *dSmoother
	lbuf, zero []float64 // log b before its exp; zeros (one chunk)
}

// newScalingIter starts from the potentials, or returns nil when they do not
// fit the scaling range.
func newScalingIter(p *problem, lv *level, eps float64, pot *potentials) *scalingIter {
	if p.product || p.symmetric {
		return nil // the a (x) b reference and the symmetric step are in the log domain only
	}
	K := len(lv.a)
	st := &scalingIter{p: p, lv: lv, eps: eps, lam: p.lambdaAt(eps), k: newBandKernel(lv.rows, lv.cols, lv.dx, lv.dy, eps, initialCutoff)}
	alloc := func() []float64 { return make([]float64, lv.n) }
	expOf := func(x []float64) []float64 {
		out := alloc()
		for i := range out {
			out[i] = 1
			if x != nil {
				out[i] = math.Exp(x[i] / eps)
			}
		}
		return out
	}
	for k := range K {
		st.u = append(st.u, alloc())
		var g []float64
		if pot != nil {
			g = pot.g[k]
		}
		st.v = append(st.v, expOf(g))
		st.kv = append(st.kv, alloc())
		st.ku = append(st.ku, alloc())
	}
	for range K + 1 {
		st.tmp = append(st.tmp, alloc())
	}
	for range (lv.n + chunk - 1) / chunk {
		st.l = append(st.l, make([]float64, K))
	}
	st.b = alloc()
	st.lbuf, st.zero = alloc(), make([]float64, chunk)
	if p.debias {
		var d []float64
		if pot != nil {
			d = pot.d
		}
		st.d, st.kd = expOf(d), alloc()
		if p.smoothDebias {
			st.smooth = newDSmoother(lv, eps)
		}
	}
	for _, v := range append(st.v, st.d) {
		for i, x := range v {
			if (lv.mask == nil || lv.mask[i]) && !(x >= tiny && x <= huge) {
				return nil
			}
		}
	}
	st.resid = make([]float64, K)
	st.bad = make([]string, K)
	st.inRng = make([]bool, K)
	st.mode = newMassMode(p)
	st.tr = st.k.transposes()
	st.au = lv.a
	if st.tr {
		st.au = make([][]float64, K)
		for k := range K {
			st.au[k] = alloc()
			transpose(st.au[k], lv.a[k], lv.rows, lv.cols)
		}
	}
	parallel.For(K, p.workers, func(k int) { st.applyV(st.k, st.kv[k], st.v[k], st.tmp[k]) })
	return st
}

// applyV writes K v (v row-major) to dst in u's layout; applyU writes K u
// (u in its layout) to a row-major dst.
func (st *scalingIter) applyV(k *bandKernel, dst, v, tmp []float64) {
	if st.tr {
		k.applyNT(dst, v, tmp)
	} else {
		k.Apply(dst, v, tmp)
	}
}

func (st *scalingIter) applyU(k *bandKernel, dst, u, tmp []float64) {
	if st.tr {
		k.applyTN(dst, u, tmp)
	} else {
		k.Apply(dst, u, tmp)
	}
}

// second is the second marginal the scalings answer to: the fixed target
// of a transport, else the barycenter.
func (st *scalingIter) second() []float64 {
	if st.lv.target != nil {
		return st.lv.target
	}
	return st.b
}

// rowMajor returns x (in u's layout) row-major.
func (st *scalingIter) rowMajor(x []float64) []float64 {
	if !st.tr {
		return x
	}
	out := make([]float64, len(x))
	transpose(out, x, st.lv.cols, st.lv.rows)
	return out
}

// pixel names index i of an array in u's layout (uSide) or row-major.
func (st *scalingIter) pixel(i int, uSide bool) (row, col int) {
	if uSide && st.tr {
		return i % st.lv.rows, i / st.lv.rows
	}
	return i / st.lv.cols, i % st.lv.cols
}

func (st *scalingIter) method() Method          { return MethodScaling }
func (st *scalingIter) band() int               { return max(st.k.rx, st.k.ry) }
func (st *scalingIter) debiasResidual() float64 { return st.dres }
func (st *scalingIter) debiasEquation() float64 { return st.deq }

func (st *scalingIter) logB() []float64 { return logOf(st.b) }

func (st *scalingIter) duals() (F, G, LKv, LKu []float64) {
	return logOf(st.rowMajor(st.u[0])), logOf(st.v[0]), logOf(st.rowMajor(st.kv[0])), logOf(st.ku[0])
}

func (st *scalingIter) state() *potentials {
	pot := &potentials{}
	pf := func(x []float64) []float64 {
		out := logOf(x)
		for i := range out {
			out[i] *= st.eps
		}
		return out
	}
	for _, v := range st.v {
		pot.g = append(pot.g, pf(v))
	}
	if st.d != nil {
		pot.d = pf(st.d)
	}
	return pot
}

// relax returns target * g(old/target) with g the [1/1] Pade approximant
// of x^c, c = 1 - omega, at x = 1:
//
//	g(x) = ((1 + c) x + (1 - c)) / ((1 - c) x + (1 + c)),
//
// in place of the over-relaxed update old^(1-omega) * target^omega. g has
// the value 1 and the slope c of x^c at 1, so the fixed point and the
// linear rate that sets omega are those of the power form (Young's theory
// needs only the linearisation); far from the solution, where the scalings
// move by orders of magnitude per step and the power form overshoots the
// float64 range, g stays within [(1+c)/(1-c), (1-c)/(1+c)] (0.026 to 39 at
// omega 1.95). It needs one division where the power form needed a log and
// an exp (measured: they were 45% of a step at epsilon 16, 128^2).
func relax(old, target, omega float64) float64 {
	if omega == 1 || old <= 0 || target <= 0 {
		return target
	}
	c := 1 - omega
	return target * ((1+c)*old + (1-c)*target) / ((1-c)*old + (1+c)*target)
}

// step: the updates of Barycenter on scalings; b comes from the shared rule
// (logMarginal) applied to log K u_k.
func (st *scalingIter) step(omega float64) float64 {
	p, lv := st.p, st.lv
	K := len(lv.a)
	lam := st.lam
	parallel.For(K, p.workers, func(k int) {
		u, a, kv := st.u[k], st.au[k], st.kv[k]
		if lam == 1 {
			relaxDiv(u, a, kv, a, omega)
		} else {
			for i := range u {
				t := 0.0
				if a[i] > 0 {
					t = math.Pow(a[i]/kv[i], lam)
				}
				u[i] = relax(u[i], t, omega)
			}
		}
		st.applyU(st.k, st.ku[k], u, st.tmp[k])
	})
	// b pixel by pixel in a fixed order of k, so that the result does not
	// depend on the number of workers.
	nc := (lv.n + chunk - 1) / chunk
	geometric := lv.target == nil && st.d == nil && lam == 1
	parallel.For(nc, p.workers, func(c int) {
		if geometric {
			// b = prod_k (K u_k)^w_k, the logs and the exp four lanes at a
			// time (one math.Log per input and pixel was a fifth of a solve
			// at epsilon 16); logMarginal's rule by maskLogB.
			i0, i1 := c*chunk, min((c+1)*chunk, lv.n)
			acc := st.lbuf[i0:i1]
			clear(acc)
			for k, w := range p.w {
				if w != 0 {
					logAxpy(acc, st.ku[k][i0:i1], w)
				}
			}
			maskLogB(acc, lv, i0)
			expSum(st.b[i0:i1], acc, st.zero[:i1-i0])
			return
		}
		l := st.l[c]
		for i := c * chunk; i < min((c+1)*chunk, lv.n); i++ {
			if lv.target != nil {
				st.b[i] = lv.target[i]
				continue
			}
			for k := range K {
				l[k] = math.Log(st.ku[k][i])
			}
			ld := 0.0
			if st.d != nil {
				ld = math.Log(st.d[i])
			}
			st.b[i] = math.Exp(p.logMarginal(lv, i, l, ld, st.lam))
		}
	})
	bmax := 0.0 // b / bmax weighs the mass mode
	if st.mode != nil {
		bmax = slices.Max(st.b)
	}
	// v_k, then K v_k and the residual of input k. Without the mass mode
	// the two need no barrier between them, so they run as one task per
	// input (and the debiasing field's update as one more).
	vUpdate := func(k int) {
		v, ku := st.v[k], st.ku[k]
		if lam == 1 && bmax == 0 {
			relaxDiv(v, st.b, ku, ku, omega)
			return
		}
		var d, ws float64
		for i := range v {
			t := 0.0
			if ku[i] > 0 {
				t = st.b[i] / ku[i]
				if lam != 1 {
					t = math.Pow(t, lam)
				}
			}
			t = relax(v[i], t, omega)
			if bmax > 0 && t > 0 && v[i] > 0 {
				w := st.b[i] / bmax
				d += w * math.Log(t/v[i])
				ws += w
			}
			v[i] = t
		}
		if bmax > 0 {
			st.mode.delta[k] = d / ws
		}
	}
	finish := func(k int, shifts []float64) {
		v := st.v[k]
		if shifts != nil {
			// Move v_k along the mode, and u_k as its update would follow
			// (u = (a / K v)^lambda), so that the residual is measured at a
			// consistent state.
			ev, eu := math.Exp(shifts[k]), math.Exp(-lam*shifts[k])
			for i := range v {
				v[i] *= ev
				st.u[k][i] *= eu
			}
		}
		kv := st.kv[k]
		st.applyV(st.k, kv, v, st.tmp[k])
		// health's strict check, here while kv is fresh in the cache and
		// without a pass of its own over five arrays per input.
		st.inRng[k] = inRange(st.au[k], kv, st.u[k], st.second(), v, tiny, huge)
		if lam == 1 {
			st.resid[k] = productL1(st.u[k], kv, st.au[k]) / lv.mass[k]
		} else {
			var vi violation
			for i, a := range st.au[k] {
				if a > 0 {
					// u = (a / K v)^lambda: u K v = a^lambda (K v)^(1 - lambda).
					a = math.Pow(a, lam) * math.Pow(kv[i], 1-lam)
				}
				vi.add(st.u[k][i]*kv[i], a)
			}
			st.resid[k] = vi.value(lv.mass[k])
		}
	}
	var shifts []float64
	if st.mode != nil {
		parallel.For(K, p.workers, vUpdate)
		shifts = st.mode.shifts(lam, omega)
	}
	parallel.For(K+1, p.workers, func(k int) {
		if k == K {
			if st.d != nil {
				st.debias()
			}
			return
		}
		if st.mode == nil {
			vUpdate(k)
		}
		finish(k, shifts)
	})
	r := slices.Max(st.resid)
	if st.mode != nil {
		r += st.mode.dist
	}
	return r
}

// debias: d = sqrt(d b / K d), recording |d K d - b|_1 before the update
// (with smoothing: the change of log d, see dSmoother).
func (st *scalingIter) debias() {
	st.k.Apply(st.kd, st.d, st.tmp[len(st.lv.a)])
	var v violation
	if st.smooth != nil {
		st.smooth.saveScalings(st.d)
	}
	for i, d := range st.d {
		v.add(d*st.kd[i], st.b[i])
		if st.kd[i] > 0 {
			st.d[i] = math.Sqrt(d * st.b[i] / st.kd[i])
		}
	}
	st.dres, st.deq = v.s, v.s
	if st.smooth != nil {
		st.dres = st.smooth.applyScalings(st.d, st.b)
	}
}

// health returns "" while every scaling is in the exact range.
//
// Over-relaxed steps may pass through extreme values and recover, so with
// strict unset only values that are lost (zero, infinite, NaN) count.
func (st *scalingIter) health(strict bool) string {
	lv := st.lv
	// The strict range implies the loose one; step checked it per input.
	if !slices.Contains(st.inRng, false) {
		return ""
	}
	lo, hi := tiny, huge
	if !strict {
		lo, hi = 0, math.MaxFloat64
	}
	parallel.For(len(lv.a), st.p.workers, func(k int) {
		st.bad[k] = ""
		u, v, kv := st.u[k], st.v[k], st.kv[k]
		b := st.second()
		if inRange(st.au[k], kv, u, b, v, lo, hi) {
			return
		}
		// u and K v are in u's layout, b and v row-major (see tr).
		for i, a := range st.au[k] {
			r, c := st.pixel(i, true)
			if a > 0 && !(kv[i] > lo) {
				st.bad[k] = fmt.Sprintf("K v underflows (%.3g) at row %d, column %d of input %d", kv[i], r, c, k+1)
				return
			}
			// A pixel with mass needs its scalings: one that underflowed to
			// zero (an over-relaxed step on a pixel of tiny mass) made a
			// transport's dual value -Inf (measured).
			if a > 0 && !(u[i] > lo) {
				st.bad[k] = fmt.Sprintf("u underflows (%.3g) at row %d, column %d of input %d", u[i], r, c, k+1)
				return
			}
			if !(u[i] <= hi) {
				st.bad[k] = fmt.Sprintf("scalings overflow at row %d, column %d of input %d", r, c, k+1)
				return
			}
		}
		for i, x := range v {
			r, c := st.pixel(i, false)
			if b != nil && b[i] > 0 && !(x > lo) {
				st.bad[k] = fmt.Sprintf("v underflows (%.3g) at row %d, column %d of input %d", x, r, c, k+1)
				return
			}
			if !(x <= hi) {
				st.bad[k] = fmt.Sprintf("scalings overflow at row %d, column %d of input %d", r, c, k+1)
				return
			}
		}
	})
	for _, m := range st.bad {
		if m != "" {
			return fmt.Sprintf("epsilon %g too small for the scaling iteration: %s", st.eps, m)
		}
	}
	return ""
}

// verify measures, with the untruncated kernel, how much the band changes
// the second marginals, max over inputs of sum_j v_j |(K - K_band) u|_j, and
// the first-marginal residual under the untruncated kernel; it widens the
// band when the band would dominate the violation it is measured with. An
// a-priori bound (cutoff * |u|_1 * |v|_1) is useless here, since the
// scalings span 1e+-100 at moderate epsilon, so the error is measured, at
// the price of a few kernel applications, every checkEvery iterations and
// before convergence is declared.
func (st *scalingIter) verify(r, tol float64) (float64, bool) {
	lv := st.lv
	if st.k.rx >= lv.cols-1 && st.k.ry >= lv.rows-1 {
		return r, false
	}
	K := len(lv.a)
	if st.full == nil {
		st.full = newBandKernel(lv.rows, lv.cols, lv.dx, lv.dy, st.eps, 0)
		st.checks = make([]float64, 2*K)
		for range K {
			st.fullBuf = append(st.fullBuf, make([]float64, lv.n))
		}
	}
	full, e := st.full, st.checks
	parallel.For(K, st.p.workers, func(k int) {
		buf := st.fullBuf[k]
		st.applyV(full, buf, st.v[k], st.tmp[k])
		var rv violation
		for i, x := range buf {
			rv.add(st.u[k][i]*x, st.au[k][i])
		}
		st.applyU(full, buf, st.u[k], st.tmp[k])
		var e2 float64
		for i, x := range buf {
			e2 += st.v[k][i] * math.Abs(x-st.ku[k][i])
		}
		e[2*k], e[2*k+1] = e2, rv.value(lv.mass[k])
	})
	var trunc, resid float64
	for k := range K {
		trunc = math.Max(trunc, e[2*k])
		resid = math.Max(resid, e[2*k+1])
	}
	allowed := math.Max(0.1*r, tol/2)
	if trunc > allowed || math.Abs(resid-r) > allowed {
		st.widen()
		return r, true
	}
	return math.Max(r, resid), false
}

// widen rebuilds the kernel with a band twenty orders of magnitude deeper,
// or untruncated once that reaches the float64 range.
func (st *scalingIter) widen() {
	lv := st.lv
	c := st.k.Cutoff * 1e-20
	if c < 1e-300 {
		c = 0
	}
	st.k = newBandKernel(lv.rows, lv.cols, lv.dx, lv.dy, st.eps, c)
	parallel.For(len(lv.a), st.p.workers, func(k int) { st.applyV(st.k, st.kv[k], st.v[k], st.tmp[k]) })
}
