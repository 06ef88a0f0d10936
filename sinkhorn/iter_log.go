package sinkhorn

import (
	"barygrid/internal/parallel"
	"math"
	"slices"
)

// logIter is the log-domain representation: F_k = log u_k, G_k = log v_k,
// log b and log d, with the kernel applied as a log-sum-exp. It is exact
// whatever the range of the potentials.
type logIter struct {
	p              *problem
	lv             *level
	eps, lam       float64 // epsilon and the KL exponent rho / (rho + eps)
	k              *logKernel
	F, G, LKv, LKu [][]float64
	lb, ld, lkd    []float64
	tmp            [][]float64
	scr            []*lseScratch
	abs            []*absKernel // absorbed streams: K v_k, then K u_k, then K d; nil entries over budget
	mode           *massMode    // unbalanced barycenters only
	bw             []float64
	l              [][]float64 // per chunk: log K u_k at one pixel
	resid          []float64
	dres, deq      float64
	smooth         *dSmoother
	single         bool    // some absorbed kernels keep single-precision weights
	lastCheck      float64 // verify's residual at the previous periodic check
}

// singleTol: solves asking for a tolerance below it keep double-precision
// kernels (see verify).
const singleTol = 1e-7

// chunk is the pixel range of one task in the pixel-wise updates.
const chunk = 4096

func newLogIter(p *problem, lv *level, eps float64, pot *potentials) *logIter {
	K := len(lv.a)
	st := &logIter{p: p, lv: lv, eps: eps, lam: p.lambdaAt(eps), k: newLogKernel(lv.rows, lv.cols, lv.dx, lv.dy, eps)}
	alloc := func() []float64 { return make([]float64, lv.n) }
	for k := range K {
		st.F = append(st.F, alloc())
		g := alloc()
		if pot != nil {
			for i, x := range pot.g[k] {
				g[i] = x / eps
			}
		} else if p.product {
			copy(g, lv.lt)
		}
		st.G = append(st.G, g)
		st.LKv = append(st.LKv, alloc())
		st.LKu = append(st.LKu, alloc())
	}
	for range K + 1 {
		st.tmp = append(st.tmp, alloc())
		st.scr = append(st.scr, newLSEScratch(lv.rows, lv.cols))
	}
	for range (lv.n + chunk - 1) / chunk {
		st.l = append(st.l, make([]float64, K))
	}
	st.lb = alloc()
	if p.debias {
		if p.smoothDebias {
			st.smooth = newDSmoother(lv, eps)
		}
		st.ld, st.lkd = alloc(), alloc()
		if pot != nil && pot.d != nil {
			for i, x := range pot.d {
				st.ld[i] = x / eps
			}
		}
	}
	st.resid = make([]float64, K)
	if st.mode = newMassMode(p); st.mode != nil {
		st.bw = alloc()
	}
	// As many streams absorbed as the budget holds, the others not (same
	// result, slower).
	st.abs = make([]*absKernel, 2*K+1)
	streams := 2 * K
	if p.debias {
		streams++ // K d
	}
	// Single-precision weights in plain balanced solves (see
	// absKernel.single); debiasing keeps double, its second residual has
	// no check with the full kernel.
	balanced := st.mode == nil && p.rho == 0
	single := balanced && !p.debias && p.tol >= singleTol
	for i := range min(streams, int(absorbBudget(K, p.n)/absorbBytes(lv, eps, balanced, single))) {
		st.abs[i] = newAbsKernel(st.k, balanced, single)
		st.abs[i].workers = p.workers
	}
	st.single = single && st.abs[0] != nil
	parallel.For(K, p.workers, func(k int) { st.conv(k, st.LKv[k], st.G[k], k) })
	return st
}

// conv applies the kernel of stream i (see abs) on task's scratch.
// dst is never src (the absorbed kernel uses dst as scratch).
func (st *logIter) conv(i int, dst, src []float64, task int) {
	if st.abs[i] != nil {
		st.abs[i].apply(dst, src, st.tmp[task])
		return
	}
	st.k.apply(dst, src, st.tmp[task], st.scr[task])
}

// absorbBudget bounds the memory of absorbed kernel instances in one
// iteration of a solve with k inputs of n pixels; streams beyond it work
// without absorption (slower, same result). What the rest of the solve
// holds (stateBytes) comes off a total of 1.25 GiB, within 256 MiB to
// 1 GiB: 32 inputs of 512^2 get 537 MB and stay under 2 GiB (measured 1.83
// GB with 512 MiB, 2.7 GB with 1 GiB); 8 inputs of 256^2 get 1 GiB, which
// absorbs all 16 streams of a plain barycenter at epsilon 16 (measured: 16 s
// and 1.77 GB peak; with 512 MiB, 8 absorbed, 52 s; with 768 MiB, 12, 49 s:
// the tasks of one step wait for the slowest stream).
func absorbBudget(k, n int) float64 {
	return min(max(1.25*(1<<30)-stateBytes(k, n), 256<<20), 1<<30)
}

// stateBytes is about what a solve holds besides absorbed kernels: a dozen
// arrays of the full grid per input.
func stateBytes(k, n int) float64 { return 12 * 8 * float64(k) * float64(n) }

// MemoryEstimate is about the peak memory in bytes of a barycenter of k
// inputs of rows x cols pixels: the iteration's arrays, the absorbed
// kernels' budget and the garbage of the stage before (a factor measured on
// 32 x 512^2: 1.83 GB). Batch runs use it to decide how many groups fit at
// once.
func MemoryEstimate(k, rows, cols int) float64 {
	n := rows * cols
	return 1.4*(stateBytes(k, n)+absorbBudget(k, n)) + newtonMemory(k, n)
}

// newtonMemory is what the Newton phase adds where it runs (newton.go;
// measured at 8 x 512^2: 1.33-1.38 GB peak against 555 MB without it).
func newtonMemory(k, n int) float64 {
	b := float64(newtonVectors) * float64(k*n) * 8
	if b > newtonBytes {
		return 0
	}
	return b
}

// absorbBytes estimates one absorbed instance's memory on the level: the
// window weights of both passes (about 2 sqrt(drop / c) + 1 per output
// and axis), their indices, its reference and its output (its scratch comes
// per task). Single-precision windows are blocked (horner.go): per output
// and pass a quarter of a block's union (the window, three more outputs'
// reach and the padding to four: about w + 4.5 singles over four), its
// normalisation and a quarter of the block's two indices.
func absorbBytes(lv *level, eps float64, balanced, single bool) float64 {
	drop, size := absorbDrop, 8.0
	if balanced && !single {
		drop = narrowDrop
	}
	if single {
		drop = singleDrop
	}
	w := func(h float64) float64 { return 2*math.Sqrt(drop*eps)/h + 1 }
	if single {
		return float64(lv.n) * ((w(lv.dx) + 6) + (w(lv.dy) + 6) + 2*(8+2) + 16)
	}
	return float64(lv.n) * (size*(w(lv.dx)+w(lv.dy)) + 16 + 2*8)
}

func (st *logIter) method() Method          { return MethodLog }
func (st *logIter) band() int               { return 0 }
func (st *logIter) debiasResidual() float64 { return st.dres }
func (st *logIter) debiasEquation() float64 { return st.deq }
func (st *logIter) health(bool) string      { return "" }
func (st *logIter) logB() []float64         { return st.lb }

// verify guards the residuals of kernels with single-precision weights.
// A residual that meets tol is recomputed with the full log-sum-exp kernel
// (exact to n ulp, TestLogKernelTruncation), and that one is returned.
// The rounded kernels also leave a floor: the streams K v and K u round
// differently, so their iteration has no exact fixed point (measured:
// 3.8e-9 on three 40^2 blobs at epsilon 1, about 1e-8 on the 8 x 128^2
// benchmark fields), which is why solves asking for less than 1e-7 keep
// double precision (singleTol). As a backstop, a residual within 100 tol
// that has not halved since the driver's previous periodic check counts
// as stalled. Where the full kernel's residual misses tol, or the
// iteration stalls, every absorbed kernel goes back to double precision
// and the stage goes on.
func (st *logIter) verify(r, tol float64) (float64, bool) {
	if !st.single || r > 100*tol {
		return r, false
	}
	if r <= tol {
		if full := st.fullResidual(); full <= tol {
			return full, false
		}
	} else {
		prev := st.lastCheck
		st.lastCheck = r
		if prev == 0 || r <= prev/2 {
			return r, false
		}
	}
	for _, a := range st.abs {
		if a != nil && a.single {
			a.setSingle(false)
		}
	}
	st.single = false
	return r, true
}

// sumLogB sets chunk c of log b by logMarginal's rule for a plain balanced
// problem: sum_k w_k log K u_k in the order of k (so the same bits), then
// maskLogB.
func (st *logIter) sumLogB(c int) {
	lv := st.lv
	lb := st.lb[c*chunk : min((c+1)*chunk, lv.n)]
	clear(lb)
	for k, w := range st.p.w {
		if w != 0 {
			lku := st.LKu[k][c*chunk:]
			lku = lku[:len(lb)]
			for i, x := range lku {
				lb[i] += w * x
			}
		}
	}
	maskLogB(lb, lv, c*chunk)
}

// fullResidual is the step's residual, max_k |u_k K v_k - a_k|_1 / |a_k|,
// with the full log-sum-exp kernel.
func (st *logIter) fullResidual() float64 {
	p, lv := st.p, st.lv
	K := len(lv.a)
	res := make([]float64, K)
	parallel.For(K, p.workers, func(k int) {
		lkv := make([]float64, lv.n) // once per stage: not worth keeping
		st.k.apply(lkv, st.G[k], st.tmp[k], st.scr[k])
		res[k] = marginalL1(st.F[k], lkv, lv.a[k]) / lv.mass[k]
	})
	return slices.Max(res)
}

func (st *logIter) duals() (F, G, LKv, LKu []float64) {
	return st.F[0], st.G[0], st.LKv[0], st.LKu[0]
}

func (st *logIter) state() *potentials {
	pot := &potentials{}
	for _, g := range st.G {
		x := make([]float64, len(g))
		for i, v := range g {
			x[i] = st.eps * v
		}
		pot.g = append(pot.g, x)
	}
	if st.ld != nil {
		pot.d = make([]float64, len(st.ld))
		for i, v := range st.ld {
			pot.d[i] = st.eps * v
		}
	}
	return pot
}

// step: F_k = lambda (log a_k - LKv_k), log b from the LKu_k, G_k =
// lambda (log b - LKu_k), log d = (log d + log b - LK d) / 2, each
// over-relaxed by omega (a linear blend in the log domain).
func (st *logIter) step(omega float64) float64 {
	p, lv := st.p, st.lv
	if p.symmetric {
		return st.symmetricStep()
	}
	K := len(lv.a)
	lam, e := st.lam, st.lam
	if p.product {
		// Reference a (x) b: the marginals enter unrelaxed.
		e = 1
	}
	ninf := math.Inf(-1)
	parallel.For(K, p.workers, func(k int) {
		F, la, lkv := st.F[k], lv.la[k], st.LKv[k]
		if lam == 1 && e == 1 {
			relaxLog(F, la, lkv, omega, false)
			st.conv(K+k, st.LKu[k], F, k)
			return
		}
		for i := range F {
			t := e*la[i] - lam*lkv[i]
			if la[i] == ninf {
				t = ninf
			} else if omega != 1 && F[i] != ninf {
				t = (1-omega)*F[i] + omega*t
			}
			F[i] = t
		}
		st.conv(K+k, st.LKu[k], F, k)
	})
	nc := (lv.n + chunk - 1) / chunk
	sum := lv.lt == nil && st.ld == nil && lam == 1
	parallel.For(nc, p.workers, func(c int) {
		if sum {
			st.sumLogB(c)
			return
		}
		l := st.l[c]
		for i := c * chunk; i < min((c+1)*chunk, lv.n); i++ {
			for k := range K {
				l[k] = st.LKu[k][i]
			}
			ld := 0.0
			if st.ld != nil {
				ld = st.ld[i]
			}
			st.lb[i] = p.logMarginal(lv, i, l, ld, st.lam)
		}
	})
	var bw []float64 // b / max b, weights of the mass mode
	if st.mode != nil {
		bw = st.bw
		m := slices.Max(st.lb)
		for i, x := range st.lb {
			bw[i] = math.Exp(x - m)
		}
	}
	parallel.For(K, p.workers, func(k int) {
		G, lku := st.G[k], st.LKu[k]
		if bw == nil && lam == 1 && e == 1 {
			relaxLog(G, st.lb, lku, omega, true)
			return
		}
		var d, ws float64
		for i := range G {
			t := e*st.lb[i] - lam*lku[i]
			if st.lb[i] == ninf || lku[i] == ninf {
				t = ninf
			} else if omega != 1 && G[i] != ninf {
				t = (1-omega)*G[i] + omega*t
			}
			if bw != nil && t != ninf && G[i] != ninf {
				d += bw[i] * (t - G[i])
				ws += bw[i]
			}
			G[i] = t
		}
		if bw != nil {
			st.mode.delta[k] = d / ws
		}
	})
	shifts := st.mode.shifts(lam, omega)
	parallel.For(K+1, p.workers, func(k int) {
		if k == K {
			if st.ld != nil {
				st.debias()
			}
			return
		}
		G := st.G[k]
		if shifts != nil {
			// Move log v_k along the mode, and log u_k as its update would
			// follow (u = (a / K v)^lambda), so that the residual is measured
			// at a consistent state.
			shift(G, shifts[k])
			shift(st.F[k], -lam*shifts[k])
		}
		lkv := st.LKv[k]
		st.conv(k, lkv, G, k)
		if lam == 1 {
			// math.Exp here, one term at a time, was 8% of a 128^2 solve.
			st.resid[k] = marginalL1(st.F[k], lkv, lv.a[k]) / lv.mass[k]
		} else {
			var v violation
			for i, a := range lv.a[k] {
				m := 0.0
				if st.F[k][i] != ninf {
					m = math.Exp(st.F[k][i] + lkv[i])
				}
				if a > 0 {
					// u = a^e / (K v)^lambda: u K v = a^e (K v)^(1 - lambda).
					a = math.Exp(e*lv.la[k][i] + (1-lam)*lkv[i])
				}
				v.add(m, a)
			}
			st.resid[k] = v.value(lv.mass[k])
		}
	})
	r := slices.Max(st.resid)
	if st.mode != nil {
		r += st.mode.dist
	}
	return r
}

// debias updates log d and records |d K d - b|_1 before the update (with
// smoothing: the change of log d, see dSmoother).
func (st *logIter) debias() {
	ninf := math.Inf(-1)
	K := len(st.lv.a)
	st.conv(2*K, st.lkd, st.ld, K)
	var v violation
	for i := range st.ld {
		if st.lb[i] != ninf {
			v.add(math.Exp(st.ld[i]+st.lkd[i]), math.Exp(st.lb[i]))
		}
	}
	st.dres, st.deq = v.s, v.s
	if st.smooth != nil {
		st.smooth.save(st.ld)
	}
	for i := range st.ld {
		if st.lb[i] == ninf || math.IsInf(st.lkd[i], 0) || math.IsNaN(st.lkd[i]) {
			st.ld[i] = ninf
			continue
		}
		st.ld[i] = 0.5 * (st.ld[i] + st.lb[i] - st.lkd[i])
	}
	if st.smooth != nil {
		st.dres = st.smooth.applyLog(st.ld, st.lb)
	}
}

// symmetricStep is the update for transporting a measure to itself, where
// both potentials are equal at the fixed point: G = (G + log a - LSE(G)) / 2,
// the averaged ("symmetric") Sinkhorn step (Feydy et al., AISTATS 2019),
// which converges in a few dozen iterations where the alternating one
// needs thousands (measured: 4214 and 2309 at epsilon 4 on 128^2). One
// kernel application per iteration.
func (st *logIter) symmetricStep() float64 {
	lv := st.lv
	G, F, lkv, la := st.G[0], st.F[0], st.LKv[0], lv.la[0]
	ninf := math.Inf(-1)
	for i := range G {
		if la[i] == ninf {
			G[i] = ninf
			continue
		}
		G[i] = 0.5 * (G[i] + la[i] - lkv[i])
	}
	copy(F, G)
	st.conv(0, lkv, G, 0)
	copy(st.LKu[0], lkv)
	copy(st.lb, la)
	var v violation
	for i, a := range lv.a[0] {
		m := 0.0
		if F[i] != ninf {
			m = math.Exp(F[i] + lkv[i])
		}
		v.add(m, a)
	}
	return v.value(lv.mass[0])
}
