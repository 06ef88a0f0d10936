package sinkhorn

import (
	"math"
	"math/rand/v2"
	"testing"

	"barygrid/grid"
)

// fullLSE is the definition, summed over every term with one max shift per
// output.
func fullLSE(h []float64, c float64) []float64 {
	out := make([]float64, len(h))
	for i := range out {
		m := math.Inf(-1)
		for j, x := range h {
			d := float64(i - j)
			m = math.Max(m, x-c*d*d)
		}
		if math.IsInf(m, -1) {
			out[i] = m
			continue
		}
		var s float64
		for j, x := range h {
			d := float64(i - j)
			s += math.Exp(x - c*d*d - m)
		}
		out[i] = m + math.Log(s)
	}
	return out
}

// The windowed log-sum-exp equals the full sum on random potentials with
// ranges far beyond exp's (the scaling domain could not represent them),
// holes of zero mass, and smooth potentials as the iteration meets them.
// The truncation error is stated: each dropped term is below exp(-36)
// relative to the largest, so the relative error stays below n * 2.3e-16.
func TestLogKernelTruncation(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	s := newLSEScratch(300, 300)
	worst := 0.0
	for trial := 0; trial < 200; trial++ {
		n := 1 + rng.IntN(300)
		c := math.Pow(10, -3+4*rng.Float64()) // eps from 0.1 to 1000 px^2
		h := make([]float64, n)
		kind := trial % 4
		for j := range h {
			x := float64(j)
			switch kind {
			case 0: // rough, range about 2000
				h[j] = 1000 * (2*rng.Float64() - 1)
			case 1: // smooth, tilted parabola, as converged potentials look
				h[j] = (-0.3*(x-0.4*float64(n))*(x-0.4*float64(n)) + 7*x) * c
			case 2: // zero-mass holes
				h[j] = 50 * rng.Float64()
				if rng.Float64() < 0.4 {
					h[j] = math.Inf(-1)
				}
			case 3: // two separated bumps, both within the window of some outputs
				h[j] = -c * math.Min((x-10)*(x-10), (x-float64(n)+10)*(x-float64(n)+10))
			}
		}
		want := fullLSE(h, c)
		got := make([]float64, n)
		lseLine(got, h, c, logDrop, s, nil)
		for i := range got {
			if math.IsInf(want[i], -1) {
				if !math.IsInf(got[i], -1) {
					t.Fatalf("trial %d: out[%d] = %g, want -Inf", trial, i, got[i])
				}
				continue
			}
			// log-domain values: the absolute error is the relative error of
			// the sum.
			e := math.Abs(got[i] - want[i])
			worst = math.Max(worst, e)
			if e > float64(n)*3e-16+1e-13 {
				t.Fatalf("trial %d (kind %d, n %d, c %g): out[%d] = %.17g, full sum %.17g", trial, kind, n, c, i, got[i], want[i])
			}
		}
	}
	t.Logf("largest error in the log of an output: %.3g", worst)
}

// The windows lseLine records are exactly the span of the terms within
// drop of each output's largest, found by brute force over the whole line:
// the scans stop on bounds (prefix and suffix maxima, the envelope), and a
// bound that cut a window short would drop a term that belongs to it.
// Potentials as in TestLogKernelTruncation, steeper ones included, at the
// single-precision windows' drop.
func TestWindowsExact(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	s := newLSEScratch(300, 300)
	for trial := 0; trial < 200; trial++ {
		n := 1 + rng.IntN(300)
		c := math.Pow(10, -2+3*rng.Float64())
		h := make([]float64, n)
		x0, slope := float64(n)*rng.Float64(), 40*(2*rng.Float64()-1)
		for j := range h {
			x := float64(j)
			switch trial % 4 {
			case 0:
				h[j] = 1000 * (2*rng.Float64() - 1)
			case 1: // a potential whose map moves mass tens of pixels
				h[j] = c * (-0.5*(x-x0)*(x-x0) + slope*x)
			case 2:
				h[j] = 50 * rng.Float64()
				if rng.Float64() < 0.4 {
					h[j] = math.Inf(-1)
				}
			case 3:
				h[j] = c * (-0.3*(x-x0)*(x-x0) + slope*x + 30*math.Sin(x/7))
			}
		}
		var rec windows
		rec.single = true
		rec.reset()
		out := make([]float64, n)
		lseLine(out, h, c, singleDrop, s, &rec)
		for i := range n {
			best := math.Inf(-1)
			for j, v := range h {
				d := float64(i - j)
				best = math.Max(best, v-c*d*d)
			}
			lo, hi := -1, -2
			for j, v := range h {
				d := float64(i - j)
				if v-c*d*d-best > -singleDrop {
					if lo < 0 {
						lo = j
					}
					hi = j
				}
			}
			glo, glen := int(rec.lo[i]), int(rec.off[i+1]-rec.off[i])
			if math.IsInf(best, -1) {
				if glen != 0 {
					t.Fatalf("trial %d: output %d has no finite term but a window of %d", trial, i, glen)
				}
				continue
			}
			if glo != lo || glo+glen-1 != hi {
				t.Fatalf("trial %d (n %d, c %g): output %d window [%d, %d], want [%d, %d]", trial, n, c, i, glo, glo+glen-1, lo, hi)
			}
		}
	}
}

// The 2-D kernel is the dense Gibbs kernel (definition), anisotropic pixels
// included.
func TestLogKernelDense(t *testing.T) {
	const rows, cols = 6, 9
	dx, dy, eps := 0.7, 1.3, 0.9
	rng := rand.New(rand.NewPCG(5, 6))
	src := make([]float64, rows*cols)
	for i := range src {
		src[i] = 30 * rng.Float64()
	}
	k := newLogKernel(rows, cols, dx, dy, eps)
	got, tmp := make([]float64, rows*cols), make([]float64, rows*cols)
	k.apply(got, src, tmp, newLSEScratch(rows, cols))
	for p := range got {
		m := math.Inf(-1)
		terms := make([]float64, len(src))
		for q := range src {
			ddx, ddy := dx*float64(p%cols-q%cols), dy*float64(p/cols-q/cols)
			terms[q] = src[q] - (ddx*ddx+ddy*ddy)/eps
			m = math.Max(m, terms[q])
		}
		var s float64
		for _, x := range terms {
			s += math.Exp(x - m)
		}
		if want := m + math.Log(s); math.Abs(got[p]-want) > 1e-12 {
			t.Errorf("pixel %d: %.15g, dense %.15g", p, got[p], want)
		}
	}
}

// expNeg against math.Exp over its range.
func TestExpNeg(t *testing.T) {
	worst := 0.0
	for i := 0; i <= 1000000; i++ {
		x := -singleDrop + (singleDrop+singleMax)*float64(i)/1000000
		e := math.Abs(expNeg(x)/math.Exp(x) - 1)
		worst = math.Max(worst, e)
	}
	if worst > 1e-15 {
		t.Errorf("largest relative error %g", worst)
	}
	t.Logf("largest relative error %.3g", worst)
}

// denseLSE is the 2-D definition: log sum_q exp(src(q) - |p - q|^2 / eps).
func denseLSE(src []float64, rows, cols int, dx, dy, eps float64) []float64 {
	out := make([]float64, len(src))
	for p := range out {
		m := math.Inf(-1)
		for q, x := range src {
			ddx, ddy := dx*float64(p%cols-q%cols), dy*float64(p/cols-q/cols)
			m = math.Max(m, x-(ddx*ddx+ddy*ddy)/eps)
		}
		var s float64
		for q, x := range src {
			ddx, ddy := dx*float64(p%cols-q%cols), dy*float64(p/cols-q/cols)
			s += math.Exp(x - (ddx*ddx+ddy*ddy)/eps - m)
		}
		out[p] = m + math.Log(s)
	}
	return out
}

// The absorbed kernel equals the dense definition for inputs that drift
// from the one it was built for, within the absorption range (no rebuild)
// and beyond it (rebuilt), with zero-mass holes, anisotropic pixels and odd
// sizes. The potential is a tilted paraboloid over epsilon, whose range is
// far beyond exp's, as converged potentials are.
func TestAbsorbedKernel(t *testing.T) {
	const rows, cols = 23, 17
	dx, dy, eps := 1.0, 1.4, 0.8
	rng := rand.New(rand.NewPCG(7, 8))
	h0 := make([]float64, rows*cols)
	for i := range h0 {
		x, y := float64(i%cols)-6, float64(i/cols)-13
		h0[i] = (-(x*x+y*y)/3 + 4*x - 2*y) / eps
		if rng.Float64() < 0.1 {
			h0[i] = math.Inf(-1)
		}
	}
	// Single-precision weights are each within 2^-24 of themselves, so each
	// pass's sum within a factor 1 +- 2^-24 and the log of an output
	// within 2^-23 after both passes (standard rounding fact).
	for _, mode := range []struct{ balanced, single bool }{{false, false}, {true, false}, {true, true}} {
		balanced := mode.balanced
		a := newAbsKernel(newLogKernel(rows, cols, dx, dy, eps), balanced, mode.single)
		tol := 1e-12
		if mode.single {
			tol = 0x1p-23
		}
		got := make([]float64, rows*cols)
		x := make([]float64, rows*cols)
		worst := 0.0
		// Drifts within a.max of the reference, after a constant offset
		// (the kernel commutes with constants), reuse the windows.
		for trial, c := range []struct{ amp, offset float64 }{{0, 0}, {1, 0}, {3, 0}, {a.max - 0.1, 0}, {3, 40}, {a.max - 0.1, -25}, {20, 0}} {
			amp := c.amp
			h := append([]float64(nil), h0...)
			for i := range h {
				if !math.IsInf(h[i], -1) {
					h[i] += amp*(2*rng.Float64()-1) + c.offset
				}
			}
			before := a.builds
			a.apply(got, h, x)
			want := denseLSE(h, rows, cols, dx, dy, eps)
			for i := range got {
				e := math.Abs(got[i] - want[i])
				worst = math.Max(worst, e)
				if e > tol {
					t.Fatalf("%+v, trial %d (drift %g): pixel %d: %.15g, dense %.15g", mode, trial, amp, i, got[i], want[i])
				}
			}
			rebuilt := a.builds > before
			if wantRebuild := trial == 0 || amp > a.max; rebuilt != wantRebuild {
				t.Errorf("balanced %v, trial %d (drift %g): rebuilt %v", balanced, trial, amp, rebuilt)
			}
		}
		t.Logf("%+v: largest error in the log of an output: %.3g", mode, worst)
	}
}

// fastLog against math.Log (the standard library's, an independent
// implementation) over the range the scaling iteration meets.
func TestFastLog(t *testing.T) {
	worst := 0.0
	for i := 0; i <= 1000000; i++ {
		x := math.Exp(-700 + 1400*float64(i)/1000000)
		y := math.Log(x)
		// Absolute below 1, relative above: what the result exp(sum w log)
		// inherits is the absolute error of the log.
		e := math.Abs(fastLog(x)-y) / math.Max(1, math.Abs(y))
		worst = math.Max(worst, e)
	}
	for _, x := range []float64{1, 2, 0.5, 1 + 1e-12, 1 - 1e-12} {
		if d := math.Abs(fastLog(x) - math.Log(x)); d > 4e-16*math.Max(1, math.Abs(math.Log(x))) {
			t.Errorf("log(%g): %g, want %g", x, fastLog(x), math.Log(x))
		}
	}
	if !math.IsInf(fastLog(0), -1) || !math.IsNaN(fastLog(-1)) || fastLog(5e-324) != math.Log(5e-324) {
		t.Error("special values")
	}
	if worst > 1e-15 {
		t.Errorf("largest error %g", worst)
	}
	t.Logf("largest error (absolute below 1, relative above) %.3g", worst)
}

// dotPass (assembly where the CPU has AVX2 and FMA) against the portable
// loop on random windows of every length from 0 to 20, written with a
// stride as the absorbed kernel writes them. Sums of 20 products of
// numbers in [0, 1): FMA and the pairwise order change the last bits only.
func TestDotPass(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	x := make([]float64, 64)
	for i := range x {
		x[i] = rng.Float64()
	}
	var r windows
	r.reset()
	n := 0
	for l := 0; l <= 20; l++ {
		for rep := 0; rep < 3; rep++ {
			w := make([]float64, l)
			for j := range w {
				w[j] = rng.Float64()
			}
			r.addScaled(rng.IntN(len(x)-l+1), w, 1)
			n++
		}
	}
	const stride = 3
	got, want := make([]float64, n*stride), make([]float64, n*stride)
	dotPass(got, stride, &r, 0, n, x)
	dotPassGo(want, stride, &r, 0, n, x)
	for i := range want {
		if math.Abs(got[i]-want[i]) > 1e-14*math.Max(1, want[i]) {
			t.Errorf("output %d: %v, want %v", i, got[i], want[i])
		}
	}
	// The same windows in single precision: assembly against Go, and both
	// within 2^-24 (relative, the weights are positive) of the double sums.
	var r32 windows
	r32.single = true
	r32.reset()
	for q := 0; q < n; q++ {
		r32.addScaled(int(r.lo[q]), r.w[r.off[q]:r.off[q+1]], 1)
	}
	got32, want32 := make([]float64, n*stride), make([]float64, n*stride)
	dotPass(got32, stride, &r32, 0, n, x)
	dotPassGo(want32, stride, &r32, 0, n, x)
	for i := range want32 {
		if math.Abs(got32[i]-want32[i]) > 1e-14*math.Max(1, want32[i]) || math.Abs(got32[i]-want[i]) > 0x1p-24*want[i]+1e-15 {
			t.Errorf("single output %d: %v (Go %v), double %v", i, got32[i], want32[i], want[i])
		}
	}
	// A pass whose windows are all empty (every input -Inf) sums to zero.
	var none windows
	none.reset()
	for range 4 {
		none.addScaled(0, nil, 1)
	}
	zero := []float64{7, 7, 7, 7}
	dotPass(zero, 1, &none, 0, 4, x)
	for i, v := range zero {
		if v != 0 {
			t.Errorf("empty window %d sums to %v", i, v)
		}
	}
	// Offsets into the middle of the windows, as a line of a pass reads them.
	dotPass(got[stride:], stride, &r, 1, n-1, x)
	for o := 1; o < n; o++ {
		if math.Abs(got[o*stride]-want[(o-1)*stride+stride]) > 1e-14*math.Max(1, want[o*stride]) {
			t.Errorf("offset output %d: %v, want %v", o, got[o*stride], want[o*stride])
		}
	}
}

// A solve whose absorbed kernels keep single-precision weights reports the
// residual of the full log-sum-exp kernel (recomputed here from its final
// potentials, the definition of the first-marginal violation, Benamou et
// al. 2015). Where the full kernel's residual misses the tolerance, or the
// residual stalls, verify puts the kernels back in double precision; a
// solve below singleTol never uses single precision.
func TestSinglePrecisionResidualChecked(t *testing.T) {
	fs := []*grid.Field{gaussField(40, 40, 12, 14, 9), gaussField(40, 40, 25, 22, 16), gaussField(40, 40, 18, 30, 6)}
	solve := func(tol float64) (*problem, *Result, *logIter) {
		p, err := setup(fs, Settings{Epsilon: 1, Tol: tol, Method: MethodLog, SingleScale: true, MaxIter: 100000})
		if err != nil {
			t.Fatal(err)
		}
		res, it := p.solve()
		st, ok := it.(*logIter)
		if !ok || res.Status != Converged || st.abs[0] == nil {
			t.Fatalf("tol %g: %T, status %v", tol, it, res.Status)
		}
		return p, res, st
	}
	p, res, st := solve(1e-6)
	if !st.single || !st.abs[0].single {
		t.Fatalf("tol 1e-6: single precision not kept")
	}
	lkv, tmp := make([]float64, p.n), make([]float64, p.n)
	worst := 0.0
	for k, a := range p.a {
		st.k.apply(lkv, st.G[k], tmp, newLSEScratch(p.rows, p.cols))
		s, mass := 0.0, 0.0
		for i := range a {
			m := 0.0
			if !math.IsInf(st.F[k][i], -1) {
				m = math.Exp(st.F[k][i] + lkv[i])
			}
			s += math.Abs(m - a[i])
			mass += a[i]
		}
		worst = math.Max(worst, s/mass)
	}
	if worst > 1e-6 || math.Abs(worst-res.Residual) > 1e-9 {
		t.Errorf("tol 1e-6: reported residual %.6g, full kernel's %.6g", res.Residual, worst)
	}
	// A tolerance the state does not meet with the full kernel: the
	// kernels go back to double and the stage goes on.
	if _, more := st.verify(1e-12, 1e-11); !more || st.single || st.abs[0].single {
		t.Errorf("a residual the full kernel does not confirm was accepted (single %v)", st.single)
	}
	// A stalled residual within 100 tol does the same.
	_, _, st = solve(1e-6)
	st.verify(5e-5, 1e-6)
	if _, more := st.verify(4e-5, 1e-6); !more || st.single {
		t.Errorf("a stalled residual kept single precision")
	}
	_, _, st = solve(1e-8)
	if st.single || st.abs[0].single {
		t.Errorf("tol 1e-8 (below singleTol) used single precision")
	}
}
