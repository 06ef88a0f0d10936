package sinkhorn

import (
	"fmt"
	"math"

	"barygrid/grid"
)

// logState holds log-scalings F_k = log u_k, G_k = log v_k (potentials over
// epsilon), log b and log d.
type logState struct {
	p              *problem
	k              *LogKernel
	la             [][]float64 // log a_k (-Inf where a_k = 0)
	F, G, LKv, LKu [][]float64
	lb, ld, lkd    []float64
	tmp            [][]float64
	resid          []float64
	dres           float64
}

// warm is a log-domain starting point solved at epsilon eps: log-scalings
// f = log u, g = log v, ld = log d. The iteration resumes at eps/2, where
// the same potentials read as twice these values.
type warm struct {
	f, g [][]float64
	ld   []float64
	eps  float64
}

// logDomain runs the log-domain iteration with epsilon-scaling: it starts at
// an epsilon large enough for the problem to be easy (a tenth of the squared
// grid extent, or the target if larger) and divides by 2 per stage, each
// stage warm-started from the last and solved to a loose tolerance, the last
// to Tol (Kosowsky & Yuille 1994; Schmitzer 2019).
func (p *problem) logDomain(start *warm) *Result {
	K := len(p.a)
	st := &logState{p: p}
	alloc := func(v float64) []float64 {
		s := make([]float64, p.n)
		if v != 0 {
			for i := range s {
				s[i] = v
			}
		}
		return s
	}
	for k := range K {
		la := alloc(0)
		for i, a := range p.a[k] {
			la[i] = math.Log(a) // -Inf for zero mass
		}
		st.la = append(st.la, la)
		st.F = append(st.F, alloc(0))
		st.G = append(st.G, alloc(0))
		st.LKv = append(st.LKv, alloc(0))
		st.LKu = append(st.LKu, alloc(0))
	}
	for range K + 1 {
		st.tmp = append(st.tmp, alloc(0))
	}
	st.lb = alloc(0)
	if p.debias {
		st.ld, st.lkd = alloc(0), alloc(0)
	}
	st.resid = make([]float64, K)

	ext := math.Max(float64(p.cols)*p.dx, float64(p.rows)*p.dy)
	eps := math.Max(p.eps, ext*ext/10)
	prevEps := eps
	if start == nil && p.warm.fits(p) {
		// A warm start is already at the target epsilon: no epsilon-scaling.
		eps, prevEps = p.eps, p.eps
		for k := range K {
			copy(st.G[k], p.warm.logV[k])
		}
		if st.ld != nil {
			copy(st.ld, p.warm.logD)
		}
	}
	if start != nil {
		eps, prevEps = math.Max(p.eps, start.eps/2), start.eps
		for k := range K {
			copy(st.F[k], start.f[k])
			copy(st.G[k], start.g[k])
		}
		if st.ld != nil && start.ld != nil {
			copy(st.ld, start.ld)
		}
	}
	// F, G, ld hold potentials (eps units) between stages.
	res := &Result{Method: MethodLog}
	total := 0
	for {
		final := eps <= p.eps
		if final {
			eps = p.eps
		}
		scale := prevEps / eps
		for k := range K {
			for i := range st.F[k] {
				st.F[k][i] *= scale
				st.G[k][i] *= scale
			}
		}
		if st.ld != nil {
			for i := range st.ld {
				st.ld[i] *= scale
			}
		}
		st.k = NewLogKernel(p.rows, p.cols, p.dx, p.dy, eps)
		tol := p.tol
		cap := p.maxIter - total
		if !final {
			tol = math.Max(p.tol, 1e-3)
			cap = min(cap, 300)
		}
		grid.Parallel(K, p.workers, func(k int) { st.k.Apply(st.LKv[k], st.G[k], st.tmp[k]) })
		rl := newRelaxation(p.relax)
		var stageHist []float64
		status := IterationLimit
		for it := 0; it < cap; it++ {
			st.step(rl.omega)
			r := 0.0
			for k := range K {
				r = math.Max(r, st.resid[k])
			}
			total++
			res.Residuals = append(res.Residuals, r)
			stageHist = append(stageHist, r)
			if p.progress != nil {
				p.progress(total, r)
			}
			if math.IsNaN(r) || math.IsInf(r, 0) {
				res.Status, res.Message = NumericalFailure, fmt.Sprintf("log-domain residual became %v at epsilon %g", r, eps)
				res.Iterations, res.Residual = total, r
				return res
			}
			if r <= tol {
				status = Converged
				break
			}
			rl.update(stageHist)
		}
		res.Relax = rl.omega
		res.DebiasResidual = st.dres
		res.Iterations, res.Residual = total, stageHist[len(stageHist)-1]
		if final {
			res.Status = status
			if status == IterationLimit {
				res.Message = fmt.Sprintf("stopped after %d iterations at residual %.3g (tolerance %.3g)", total, res.Residual, p.tol)
			}
			break
		}
		if total >= p.maxIter {
			res.Status = IterationLimit
			res.Message = fmt.Sprintf("iteration cap %d reached at epsilon %g before the target %g", p.maxIter, eps, p.eps)
			break
		}
		prevEps, eps = eps, eps/2
	}
	res.Barycenter = p.output(st.lb, true)
	res.Warm = &WarmStart{rows: p.rows, cols: p.cols, eps: p.eps}
	for k := range K {
		res.Warm.logV = append(res.Warm.logV, append([]float64(nil), st.G[k]...))
	}
	if st.ld != nil {
		res.Warm.logD = append([]float64(nil), st.ld...)
	}
	return res
}

func (st *logState) step(omega float64) {
	p := st.p
	K := len(p.a)
	ninf := math.Inf(-1)
	grid.Parallel(K, p.workers, func(k int) {
		F, la, lkv := st.F[k], st.la[k], st.LKv[k]
		for i := range F {
			t := p.lambda * (la[i] - lkv[i])
			if la[i] == ninf {
				t = ninf
			}
			if omega != 1 && F[i] != ninf && t != ninf {
				t = (1-omega)*F[i] + omega*t
			}
			F[i] = t
		}
		st.k.Apply(st.LKu[k], F, st.tmp[k])
	})
	const chunk = 4096
	nc := (p.n + chunk - 1) / chunk
	grid.Parallel(nc, p.workers, func(c int) {
		l := make([]float64, K) // per chunk, not per pixel
		for i := c * chunk; i < min((c+1)*chunk, p.n); i++ {
			if p.mask != nil && !p.mask[i] {
				st.lb[i] = ninf
				continue
			}
			var s float64
			if p.lambda == 1 {
				for k := range K {
					if p.w[k] != 0 {
						s += p.w[k] * st.LKu[k][i]
					}
				}
			} else {
				// log b = log(sum_k w_k exp((1-lambda) LKu_k)) / (1-lambda).
				for k := range K {
					l[k] = st.LKu[k][i]
				}
				s = powerMeanLog(l, p.w, 1-p.lambda)
			}
			if st.ld != nil {
				s += st.ld[i]
			}
			if math.IsNaN(s) {
				s = ninf
			}
			st.lb[i] = s
		}
	})
	grid.Parallel(K+1, p.workers, func(k int) {
		if k == K {
			if st.ld != nil {
				st.k.Apply(st.lkd, st.ld, st.tmp[K])
				var r float64
				for i := range st.ld {
					if st.lb[i] != ninf {
						r += math.Abs(math.Exp(st.ld[i]+st.lkd[i]) - math.Exp(st.lb[i]))
					}
				}
				st.dres = r
				for i := range st.ld {
					if st.lb[i] == ninf || math.IsInf(st.lkd[i], 0) || math.IsNaN(st.lkd[i]) {
						st.ld[i] = ninf
						continue
					}
					st.ld[i] = 0.5 * (st.ld[i] + st.lb[i] - st.lkd[i])
				}
			}
			return
		}
		G, lku := st.G[k], st.LKu[k]
		for i := range G {
			t := p.lambda * (st.lb[i] - lku[i])
			if st.lb[i] == ninf || lku[i] == ninf {
				t = ninf
			}
			if omega != 1 && G[i] != ninf && t != ninf {
				t = (1-omega)*G[i] + omega*t
			}
			G[i] = t
		}
		lkv := st.LKv[k]
		st.k.Apply(lkv, G, st.tmp[k])
		var r, c float64
		for i, a := range p.a[k] {
			m := 0.0
			if st.F[k][i] != ninf {
				m = math.Exp(st.F[k][i] + lkv[i])
			}
			if p.lambda != 1 && a > 0 {
				a = math.Exp(p.lambda*math.Log(a) + (1-p.lambda)*lkv[i])
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
