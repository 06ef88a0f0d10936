package sinkhorn

import (
	"fmt"
	"math"

	"barygrid/grid"
)

// Scalings outside [tiny, huge] (or a zero K v where an input has mass) mean
// the scaling iteration is about to lose digits: exp(+-644) leaves room for
// the products the updates form.
const (
	huge = 1e300
	tiny = 1e-300
)

// checkEvery is how often the band's truncation error is measured.
const checkEvery = 100

// relaxation tracks the over-relaxation factor. In auto mode it starts at 1,
// estimates the contraction rate rho of the plain iteration from the residual
// history, and moves to omega = 2 / (1 + sqrt(1 - rho)), the optimum for a
// linear fixed-point iteration of rate rho (Young's SOR theory, as applied to
// Sinkhorn by Lehmann, von Renesse, Sambale, Uschmajew 2021). If the residual
// then grows, it falls back to 1 for good.
type relaxation struct {
	omega   float64
	auto    bool
	since   int // iteration at which omega was set
	stopped bool
	best    float64
}

func newRelaxation(fixed float64) *relaxation {
	if fixed != 0 {
		return &relaxation{omega: fixed}
	}
	return &relaxation{omega: 1, auto: true, best: math.Inf(1)}
}

func (r *relaxation) update(hist []float64) {
	n := len(hist)
	if !r.auto || r.stopped || n == 0 {
		return
	}
	cur := hist[n-1]
	if r.omega != 1 {
		// Allow transient growth, but not a sustained one.
		if cur > 10*r.best || (n-r.since > 50 && cur > r.best) {
			r.omega, r.stopped = 1, true
			return
		}
		r.best = math.Min(r.best, cur)
		// Below the optimum the relaxed rate lambda exceeds omega - 1, and
		// Young's relation (lambda + omega - 1)^2 = lambda omega^2 mu^2 gives
		// the plain iteration's mu^2 back: refine omega from it.
		const span = 10
		if n-r.since >= 2*span && (n-r.since)%span == 0 {
			lam := math.Pow(hist[n-1]/hist[n-1-span], 1.0/span)
			if lam < 1 && lam > r.omega-1+0.02 {
				mu2 := (lam + r.omega - 1) * (lam + r.omega - 1) / (lam * r.omega * r.omega)
				if mu2 < 1 {
					r.omega = math.Min(1.95, 2/(1+math.Sqrt(1-mu2)))
					r.since = n
				}
			}
		}
		return
	}
	r.best = math.Min(r.best, cur)
	const warm, span = 30, 10
	if n < warm {
		return
	}
	a, b := hist[n-1-span], hist[n-1]
	if !(a > 0 && b > 0 && b < a) {
		return
	}
	rho := math.Pow(b/a, 1.0/span)
	if rho < 0.5 { // converging fast already
		return
	}
	r.omega = math.Min(1.9, 2/(1+math.Sqrt(1-rho)))
	r.since = n
	r.best = cur
}

// relax returns target * (old/target)^(1-omega), the update
// old^(1-omega) * target^omega written to need one log and one exp. The
// extrapolation factor is kept within exp(+-maxStep): far from the solution
// the scalings move by many orders of magnitude per step and an unbounded
// extrapolation overshoots the float64 range. Near the solution the factor
// is close to 1 and the bound is inactive, so the fixed point is unchanged.
func relax(old, target, omega float64) float64 {
	if omega == 1 || old <= 0 || target <= 0 {
		return target
	}
	e := (1 - omega) * math.Log(old/target)
	e = math.Max(-maxStep, math.Min(maxStep, e))
	return target * math.Exp(e)
}

var maxStep = 2.0

type scalingState struct {
	p            *problem
	k            *Kernel
	u, v, kv, ku [][]float64
	b, d, kd, P  []float64   // P = prod_k (K u_k)^{w_k} when debiasing
	tmp          [][]float64 // one per task
	resid        []float64
	full         [][]float64 // scratch for truncationError
	dres         float64     // debiasing fixed-point violation
	bad          []string
}

// scaling runs the iteration on scalings. With guard set it stops with
// NumericalFailure as soon as the scalings leave the exact range, so that the
// caller can move to the log domain.
func (p *problem) scaling(guard bool) *Result {
	K := len(p.a)
	cutoff := initialCutoff
	st := &scalingState{p: p, k: NewKernel(p.rows, p.cols, p.dx, p.dy, p.eps, cutoff)}
	alloc := func() []float64 { return make([]float64, p.n) }
	for range K {
		st.u = append(st.u, alloc())
		v := alloc()
		for i := range v {
			v[i] = 1
		}
		st.v = append(st.v, v)
		st.kv = append(st.kv, alloc())
		st.ku = append(st.ku, alloc())
	}
	for range K + 1 {
		st.tmp = append(st.tmp, alloc())
	}
	st.b = alloc()
	if p.debias {
		st.d, st.kd = alloc(), alloc()
		for i := range st.d {
			st.d[i] = 1
		}
	}
	if p.warm.fits(p) {
		for k := range K {
			for i, x := range p.warm.logV[k] {
				st.v[k][i] = math.Exp(x)
			}
		}
		if st.d != nil {
			for i, x := range p.warm.logD {
				st.d[i] = math.Exp(x)
			}
		}
	}
	st.resid = make([]float64, K)
	st.bad = make([]string, K+1)
	grid.Parallel(K, p.workers, func(k int) { st.k.Apply(st.kv[k], st.v[k], st.tmp[k]) })

	rl := newRelaxation(p.relax)
	res := &Result{Method: MethodScaling}
	for it := 1; it <= p.maxIter; it++ {
		st.step(rl.omega)
		r := 0.0
		for k := range K {
			r = math.Max(r, st.resid[k])
		}
		res.Residuals = append(res.Residuals, r)
		res.Iterations, res.Residual = it, r
		if p.progress != nil {
			p.progress(it, r)
		}
		if msg := st.health(rl.omega == 1); msg != "" || math.IsNaN(r) {
			if msg == "" {
				msg = "residual is NaN"
			}
			if rl.omega != 1 && p.relax == 0 {
				// Over-relaxation can push scalings out of range on the way;
				// start again without it.
				q := *p
				q.relax = 1
				again := q.scaling(guard)
				again.Residuals = append(res.Residuals, again.Residuals...)
				again.Iterations += it
				return again
			}
			res.Status, res.Message = NumericalFailure, msg
			if guard {
				return res
			}
			break
		}
		if r <= p.tol || it%checkEvery == 0 {
			// The band must not dominate the violation it is measured with:
			// widen when the untruncated kernel tells a different story.
			if e2, full := st.truncationError(); full >= 0 {
				allowed := math.Max(0.1*r, p.tol/2)
				if e2 > allowed || math.Abs(full-r) > allowed {
					st.widen()
					continue
				}
				r = math.Max(r, full)
				res.Residual = r
			}
		}
		if r <= p.tol {
			res.Status = Converged
			break
		}
		rl.update(res.Residuals)
		if it == p.maxIter {
			res.Status = IterationLimit
			res.Message = fmt.Sprintf("stopped after %d iterations at residual %.3g (tolerance %.3g)", it, r, p.tol)
		}
	}
	res.Relax = rl.omega
	res.DebiasResidual = st.dres
	res.Band = max(st.k.rx, st.k.ry)
	res.Warm = &WarmStart{rows: p.rows, cols: p.cols, eps: p.eps}
	for k := range K {
		res.Warm.logV = append(res.Warm.logV, logOf(st.v[k]))
	}
	if st.d != nil {
		res.Warm.logD = logOf(st.d)
	}
	res.Barycenter = p.output(st.b, false)
	return res
}

func (st *scalingState) step(omega float64) {
	p := st.p
	K := len(p.a)
	grid.Parallel(K, p.workers, func(k int) {
		u, a, kv := st.u[k], p.a[k], st.kv[k]
		for i := range u {
			t := 0.0
			if a[i] > 0 {
				t = a[i] / kv[i]
				if p.lambda != 1 {
					t = math.Pow(t, p.lambda)
				}
			}
			u[i] = relax(u[i], t, omega)
		}
		st.k.Apply(st.ku[k], u, st.tmp[k])
	})
	// b = d * prod_k (K u_k)^{w_k}, pixel by pixel in a fixed order of k so
	// that the result does not depend on the number of workers.
	const chunk = 4096
	nc := (p.n + chunk - 1) / chunk
	grid.Parallel(nc, p.workers, func(c int) {
		lo, hi := c*chunk, min((c+1)*chunk, p.n)
		l := make([]float64, K) // per chunk, not per pixel
		for i := lo; i < hi; i++ {
			if p.mask != nil && !p.mask[i] {
				st.b[i] = 0
				continue
			}
			var b float64
			if p.lambda == 1 {
				var s float64
				for k := range K {
					if p.w[k] != 0 {
						s += p.w[k] * math.Log(st.ku[k][i])
					}
				}
				b = math.Exp(s)
			} else {
				// Unbalanced: b = (sum_k w_k (K u_k)^{1-lambda})^{1/(1-lambda)}.
				for k := range K {
					l[k] = math.Log(st.ku[k][i])
				}
				b = math.Exp(powerMeanLog(l, p.w, 1-p.lambda))
			}
			if st.d != nil {
				b *= st.d[i]
			}
			st.b[i] = b
		}
	})
	grid.Parallel(K+1, p.workers, func(k int) {
		if k == K {
			if st.d != nil {
				// d = sqrt(d b / K d). The violation |d K d - b|_1, zero at the
				// fixed point, is reported beside the residual: it decays
				// sublinearly when K d = P (b = d P) has no positive
				// solution, so it cannot be part of the stopping rule.
				st.k.Apply(st.kd, st.d, st.tmp[K])
				var r float64
				for i, d := range st.d {
					r += math.Abs(d*st.kd[i] - st.b[i])
					if st.kd[i] > 0 {
						st.d[i] = math.Sqrt(d * st.b[i] / st.kd[i])
					}
				}
				st.dres = r
			}
			return
		}
		v, ku := st.v[k], st.ku[k]
		for i := range v {
			t := 0.0
			if ku[i] > 0 {
				t = st.b[i] / ku[i]
				if p.lambda != 1 {
					t = math.Pow(t, p.lambda)
				}
			}
			v[i] = relax(v[i], t, omega)
		}
		kv := st.kv[k]
		st.k.Apply(kv, v, st.tmp[k])
		var r, c float64
		for i, a := range p.a[k] {
			// Kahan sum: the residual is a small difference of unit masses.
			m := st.u[k][i] * kv[i]
			if p.lambda != 1 && a > 0 {
				// Unbalanced: violation of u = (a / K v)^lambda, that is
				// u K v = a^lambda (K v)^(1 - lambda).
				a = math.Pow(a, p.lambda) * math.Pow(kv[i], 1-p.lambda)
			}
			y := math.Abs(m-a) - c
			t := r + y
			c = (t - r) - y
			r = t
		}
		if p.lambda != 1 {
			// The unbalanced mass mode contracts by about lambda per
			// iteration, so the violation understates the distance to the
			// fixed point by 1/(1 - lambda).
			r /= 1 - p.lambda
		}
		st.resid[k] = r
	})
}

// health returns "" while every scaling is in the exact range.
//
// Over-relaxed steps may pass through extreme values and recover, so with
// strict unset only values that are lost (zero, infinite, NaN) count.
func (st *scalingState) health(strict bool) string {
	p := st.p
	lo, hi := tiny, huge
	if !strict {
		lo, hi = 0, math.MaxFloat64
	}
	grid.Parallel(len(p.a), p.workers, func(k int) {
		st.bad[k] = ""
		u, v, kv := st.u[k], st.v[k], st.kv[k]
		for i, a := range p.a[k] {
			if a > 0 && !(kv[i] > lo) {
				st.bad[k] = fmt.Sprintf("K v underflows (%.3g) at row %d, column %d of input %d", kv[i], i/p.cols, i%p.cols, k+1)
				return
			}
			if !(u[i] <= hi) || !(v[i] <= hi) {
				st.bad[k] = fmt.Sprintf("scalings overflow at row %d, column %d of input %d", i/p.cols, i%p.cols, k+1)
				return
			}
		}
	})
	for _, m := range st.bad[:len(p.a)] {
		if m != "" {
			return "epsilon too small for the scaling iteration: " + m
		}
	}
	return ""
}

// truncationError measures, with the untruncated kernel, how much the band
// changes the second marginals, max over inputs of sum_j v_j |(K - K_band) u|_j,
// and returns the first-marginal residual under the untruncated kernel. The a-priori bound cutoff*|u|_1*|v|_1 is
// useless here (the scalings span 1e+-100 at moderate epsilon), so it is
// measured, at the price of a few iterations, every checkEvery iterations
// and before convergence is declared.
func (st *scalingState) truncationError() (trunc, resid float64) {
	p := st.p
	if st.k.rx >= p.cols-1 && st.k.ry >= p.rows-1 {
		return 0, -1
	}
	full := NewKernel(p.rows, p.cols, p.dx, p.dy, p.eps, 0)
	K := len(p.a)
	if st.full == nil {
		st.full = make([][]float64, K)
		for k := range st.full {
			st.full[k] = make([]float64, p.n)
		}
	}
	e := make([]float64, 2*K)
	grid.Parallel(K, p.workers, func(k int) {
		buf := st.full[k]
		full.Apply(buf, st.v[k], st.tmp[k])
		var r float64
		for i, x := range buf {
			r += math.Abs(st.u[k][i]*x - p.a[k][i])
		}
		full.Apply(buf, st.u[k], st.tmp[k])
		var e2 float64
		for i, x := range buf {
			e2 += st.v[k][i] * math.Abs(x-st.ku[k][i])
		}
		e[2*k], e[2*k+1] = e2, r
	})
	for k := range K {
		trunc = math.Max(trunc, e[2*k])
		resid = math.Max(resid, e[2*k+1])
	}
	return trunc, resid
}

// widen rebuilds the kernel with a band twenty orders of magnitude deeper,
// or untruncated once that reaches the float64 range.
func (st *scalingState) widen() {
	p := st.p
	c := st.k.Cutoff * 1e-20
	if c < 1e-300 {
		c = 0
	}
	st.k = NewKernel(p.rows, p.cols, p.dx, p.dy, p.eps, c)
	grid.Parallel(len(p.a), p.workers, func(k int) { st.k.Apply(st.kv[k], st.v[k], st.tmp[k]) })
}

// output returns b normalised to unit mass as a field, and records b's own
// mass (the unbalanced barycenter's mass) in p.rawMass.
func (p *problem) output(b []float64, isLog bool) *grid.Field {
	f := &grid.Field{Rows: p.rows, Cols: p.cols, Data: make([]float64, p.n)}
	if isLog {
		m := math.Inf(-1)
		for _, x := range b {
			m = math.Max(m, x)
		}
		for i, x := range b {
			f.Data[i] = math.Exp(x - m)
		}
		p.rawMass = math.Exp(m) * grid.Sum(f.Data)
	} else {
		copy(f.Data, b)
		p.rawMass = grid.Sum(f.Data)
	}
	if g, err := grid.Normalize(f); err == nil {
		return g
	}
	return f
}

// powerMeanLog returns log((sum_k w_k exp(q l_k))^(1/q)), the log of the
// weighted power mean of order q of exp(l_k) (weights sum to one), written
// with log1p and expm1 around the largest term so that it stays accurate as
// q -> 0, where it tends to the geometric mean sum_k w_k l_k.
func powerMeanLog(l, w []float64, q float64) float64 {
	m := math.Inf(-1)
	for k, x := range l {
		if w[k] != 0 {
			m = math.Max(m, x)
		}
	}
	if math.IsInf(m, -1) {
		return m
	}
	var s float64
	for k, x := range l {
		if w[k] != 0 {
			s += w[k] * math.Expm1(q*(x-m))
		}
	}
	return m + math.Log1p(s)/q
}

// initialCutoff sets the first band of the scaling iteration; the periodic
// truncation check widens it when the untruncated kernel disagrees.
// Narrower starts (1e-40, 1e-25) were measured: they save little per
// iteration at epsilon 16 on 128^2 and slow over-relaxation down 4-7x.
const initialCutoff = 1e-80
