package sinkhorn

import (
	"math"
	"slices"

	"barygrid/internal/parallel"
)

// Absorption for the log-domain kernel (Schmitzer, SIAM J. Sci. Comput.
// 41(3), 2019, stabilised scaling, applied here to each 1-D pass). A kernel
// instance is built for a reference input h0 (log-sum-exp windows, see
// lseLine) and keeps, for both passes, the normalised weights
// exp(h0_j - c (i - j)^2 - out0_i) of each output's window. While the input
// h stays within absorbMax of h0 the kernel is
//
//	out = out0 + log( W2 (W1 exp(h - h0)) )
//
// with W1, W2 the two passes' window weights: one exp and one log per
// pixel and multiply-adds, instead of a dozen exps per output and pass.
// Terms dropped at build time were below exp(-absorbDrop) of an output's
// largest; with |h - h0| <= absorbMax in both passes they stay below
// exp(-absorbDrop + 4 absorbMax) = exp(-22), and the instance is rebuilt
// (exactly) as soon as the input leaves that range or changes where it is
// -Inf. TestAbsorbedKernel checks it against the full sum.
//
// The windows are the instance's memory (absorbBytes); plain balanced
// solves keep them in single precision (see single), in blocks of four
// outputs (horner.go). Balanced problems
// with double-precision windows use a narrower pair, 40 and 4.5, with the
// same exp(-22): windows of 13 instead of 15 weights at epsilon one
// squared pixel, so that all 16 streams of 8 inputs of 512^2 fit the
// absorption budget (12 did, and the 4 others' exact sums made a full-grid
// iteration 3x slower). Single-precision windows take 50 and 7 at half the
// bytes: a wider range between rebuilds, and a rebuild costs tens of
// applications (measured: rebuilds 12 -> 8 per stream over 159 full-grid
// iterations at 512^2, CPU 96 -> 77 s; at 128^2, 11.2-11.8 -> 10.0-10.8 s).
// Unbalanced problems keep 50 and 7: their slow mass mode amplifies the
// larger typical truncation error (with the narrow pair, penalty 2e6 at
// tol 1e-8 stalled at 1.9e-8). Once rebuilds ran in parallel bands, a
// still wider pair for single-precision windows, 72 and 12.5 (same
// exp(-22)), paid again: 20% more weights, rebuilds rarer (8 x 256^2: CPU
// 16.1 -> 14.3 s, wall 9.1 -> 8.2 s; 128^2 1.19 -> 1.15 s; 512^2 79.9 ->
// 75.1 s, peak 820 -> 899 MB; alternating processes).
const (
	absorbDrop = 50.0
	absorbMax  = 7.0
	narrowDrop = 40.0
	narrowMax  = 4.5
	singleDrop = 72.0
	singleMax  = 12.5
)

// windows holds the weights of every output of a pass: output o's weights
// are w[off[o]:off[o+1]] for inputs lo[o], lo[o]+1, ... of its line.
//
// With single set the weights are kept in w32, rounded to single precision
// (see absKernel.single).
type windows struct {
	lo, off []int32
	w       []float64
	single  bool
	w32     []float32
	// With blocked set (single precision only) lseLine records blocks
	// instead (see horner.go): per block of four outputs its first input
	// j0, its coefficients a[aoff[b]:aoff[b+1]], and per output nrm. A
	// block that does not fit keeps per-output windows in lo, off and w32
	// as above, and j0 = -1 - its first output there. hp holds
	// hornerPowers (shared by the bands of a pass).
	blocked  bool
	j0, aoff []int32
	a        []float32
	nrm      []float64
	hp       []float64
}

func (r *windows) reset() {
	r.lo, r.off, r.w, r.w32 = r.lo[:0], append(r.off[:0], 0), r.w[:0], r.w32[:0]
	r.j0, r.aoff, r.a, r.nrm = r.j0[:0], append(r.aoff[:0], 0), r.a[:0], r.nrm[:0]
}

// addScaled closes the next output's window: weights x[j] * inv for
// inputs lo, lo+1, ... (rounded to single precision with single set).
func (r *windows) addScaled(lo int, x []float64, inv float64) {
	if r == nil {
		return
	}
	r.lo = append(r.lo, int32(lo))
	if r.single {
		r.w32 = appendScaled(r.w32, x, inv)
		r.off = append(r.off, int32(len(r.w32)))
	} else {
		r.w = appendScaled(r.w, x, inv)
		r.off = append(r.off, int32(len(r.w)))
	}
}

// appendScaled appends x[j] * inv to w, in one growth and a plain loop (an
// append per weight was 4% of a 256^2 solve).
func appendScaled[T float32 | float64](w []T, x []float64, inv float64) []T {
	n0 := len(w)
	w = slices.Grow(w, len(x))[:n0+len(x)]
	for j, v := range x {
		w[n0+j] = T(v * inv)
	}
	return w
}

// absKernel is one absorbed instance of a log kernel, for one stream of
// inputs (for example K applied to G_k, iteration after iteration).
//
// Scratch (a grid and the 1-D pass scratch) comes from the caller, one set
// per task, not per instance, and the output grid serves as a second one:
// an instance holds only its windows, its reference and its output.
type absKernel struct {
	k         *logKernel
	drop, max float64   // absorbDrop and absorbMax, or the narrow pair
	ref, out0 []float64 // reference input and its output, row-major
	// Windows of pass 1 (along rows) and pass 2 (along columns,
	// transposed), one set per band of lines, so that a rebuild runs its
	// bands in parallel: rebuilds come in one stream at a time, and a
	// serial one left the other workers idle while it ran (a rebuild costs
	// tens of applications).
	p1, p2  []windows
	scr     []*lseScratch // one per band
	workers int           // for the rebuild's bands (parallel.For's convention)
	built   bool
	builds  int
	// fast takes the log by fastLog (2.1e-16 from math.Log). The slow mass
	// mode of an unbalanced barycenter at a large penalty amplifies such
	// errors by 1 / (1 - lambda^2) (measured: stalled at 5.6e-8 instead
	// of reaching 1e-8 at 10^6 epsilon), so it keeps math.Log.
	fast bool
	// single keeps the weights in single precision: the window sums read
	// the weights from memory once per application, and at 512^2 the 16
	// streams' weights (870 MB in double) made the iteration wait on
	// memory. Each weight is then off by at most 2^-24 of itself, so an
	// output's log by at most 6e-8: more than the truncation's exp(-22),
	// so a solve that meets its tolerance with such kernels checks its
	// residual with the full kernel (logIter.verify) and falls back to
	// double where that check fails.
	single bool
	// blocked: single-precision windows in blocks (horner.go).
	blocked bool
}

// newAbsKernel returns an instance for a balanced problem (the table log
// and the narrow windows) or not, with its weights in single precision or
// not.
func newAbsKernel(k *logKernel, balanced, single bool) *absKernel {
	n := k.rows * k.cols
	a := &absKernel{k: k, ref: make([]float64, n), out0: make([]float64, n), fast: balanced}
	a.p1, a.p2 = make([]windows, lineBands(k.rows)), make([]windows, lineBands(k.cols))
	for range max(len(a.p1), len(a.p2)) {
		a.scr = append(a.scr, newLSEScratch(k.rows, k.cols))
	}
	a.setSingle(single)
	return a
}

// lineBands is the number of bands the lines of a pass are split into.
// Each band's windows are its own; the windows do not depend on it.
func lineBands(lines int) int { return max(1, min(8, lines/16)) }

// band returns the first line of band b of nb over lines, and the next
// band's.
func band(b, nb, lines int) (int, int) { return b * lines / nb, (b + 1) * lines / nb }

// setSingle sets the weights' precision; the next application rebuilds.
func (a *absKernel) setSingle(single bool) {
	k := a.k
	a.single, a.built = single, false
	a.drop, a.max = absorbDrop, absorbMax
	switch {
	case single:
		a.drop, a.max = singleDrop, singleMax
	case a.fast:
		a.drop, a.max = narrowDrop, narrowMax
	}
	// The windows' expected size up front: growing them by doubling left
	// twice their size as garbage per instance and level (measured: 377 MB
	// allocated in a 128^2 solve whose windows hold 63 MB).
	a.blocked = single && min(k.rows, k.cols) >= 8
	size := func(ws []windows, c float64, line, lines int) {
		var hp []float64
		if a.blocked {
			hp = hornerPowers(c, line)
		}
		for b := range ws {
			l0, l1 := band(b, len(ws), lines)
			outs := (l1 - l0) * line
			w := &ws[b]
			w.single, w.blocked = single, a.blocked
			m := outs * min(line, int(2*math.Sqrt(a.drop/c))+1)
			w.w, w.w32, w.lo, w.off = nil, nil, nil, nil
			w.j0, w.aoff, w.a, w.nrm = nil, nil, nil, nil
			switch {
			case a.blocked:
				blocks := (l1 - l0) * ((line + 3) / 4)
				w.hp = hp
				w.j0, w.aoff = make([]int32, 0, blocks), make([]int32, 0, blocks+1)
				w.a = make([]float32, 0, blocks*(min(line, int(2*math.Sqrt(a.drop/c))+1)+6))
				w.nrm = make([]float64, 0, 4*blocks)
			case single:
				w.w32 = make([]float32, 0, m)
			default:
				w.w = make([]float64, 0, m)
			}
			if !a.blocked {
				w.lo, w.off = make([]int32, 0, outs), make([]int32, 0, outs+1)
			}
		}
	}
	size(a.p1, k.cx, k.cols, k.rows)
	size(a.p2, k.cy, k.rows, k.cols)
}

// near reports whether src, less a constant c, is within absorbMax of the
// reference, and -Inf exactly where it is; c is the midpoint of the range
// of src - ref. The kernel commutes with constants (K(h + c) = K h + c in
// the log domain), so a potential that drifts as a whole, as potentials do
// while the iteration settles, needs no rebuild.
func (a *absKernel) near(src []float64) (float64, bool) {
	if !a.built {
		return 0, false
	}
	lo, hi, ok := nearScan(src, a.ref)
	if !ok {
		return 0, false
	}
	if math.IsInf(lo, 1) {
		return 0, true
	}
	c := (lo + hi) / 2
	if !((hi-lo)/2 <= a.max) || math.IsNaN(c) || math.IsInf(c, 0) {
		return 0, false
	}
	return c, true
}

// rebuild computes the output for src exactly into dst (which is scratch
// until then; dst is not src) and keeps its windows; tmp2 is scratch.
func (a *absKernel) rebuild(dst, src, tmp2 []float64) {
	tmp := dst
	k := a.k
	copy(a.ref, src)
	pass := func(ws []windows, out, in []float64, lines, line int, c float64) {
		parallel.For(len(ws), a.workers, func(b int) {
			w := &ws[b]
			w.reset()
			l0, l1 := band(b, len(ws), lines)
			for l := l0; l < l1; l++ {
				lseLine(out[l*line:(l+1)*line], in[l*line:(l+1)*line], c, a.drop, a.scr[b], w)
			}
		})
	}
	pass(a.p1, tmp, src, k.rows, k.cols, k.cx)
	transpose(tmp2, tmp, k.rows, k.cols)
	pass(a.p2, tmp, tmp2, k.cols, k.rows, k.cy)
	transpose(a.out0, tmp, k.cols, k.rows)
	copy(dst, a.out0) // dst held the first pass
	a.built = true
	a.builds++
}

// apply writes the log-domain kernel of src to dst (not src); x is a
// scratch grid. The exponentials live in dst until the first pass has read
// them all; then dst holds that pass's output transposed, for the second
// pass to read contiguous columns.
//
// Each pass writes its sums in order and a transpose follows. The passes
// used to write straight into the transposed layout, one output per cache
// line: at sides of 256 and 512 a column's lines share a few cache sets.
// BenchmarkAbsorbedSides, one instance whose windows stay in the caches:
// 512^2 19-20 -> 11-12 ns per pixel, 256^2 11-12 -> 9-10 (500^2 took 11
// before). In whole solves, where 16 streams' windows come from memory,
// no change beyond the noise (8 x 512^2: 54.3 -> 53.0 s; 256^2 and 128^2
// within 3%; same bits).
func (a *absKernel) apply(dst, src, x []float64) {
	shift, ok := a.near(src)
	if !ok {
		a.rebuild(dst, src, x)
		return
	}
	n := len(src)
	expShift(dst[:n], src, a.ref, shift)
	a.linear(dst, dst, x)
	if a.fast {
		logAdd(dst[:len(src)], a.out0, shift)
		return
	}
	for i, s := range dst[:len(src)] {
		dst[i] = a.out0[i] + shift + math.Log(s)
	}
}

// linear writes the two passes' window sums of e to dst (e may be dst; x
// is scratch): the kernel applied to exp(h) is exp(out0) times the linear
// sums of exp(h - ref), so that sums of the same instance give the plan's
// conditional moments (see twoStepVariance).
func (a *absKernel) linear(dst, e, x []float64) {
	k := a.k
	a.sums(x, e, a.p1, k.rows, k.cols)
	transpose(dst, x, k.rows, k.cols)
	a.sums(x, dst, a.p2, k.cols, k.rows)
	transpose(dst, x, k.cols, k.rows)
}

// sums writes one pass's window sums of in to out, line by line (lines of
// length line, in the bands of ws).
func (a *absKernel) sums(out, in []float64, ws []windows, lines, line int) {
	for b := range ws {
		l0, l1 := band(b, len(ws), lines)
		for l := l0; l < l1; l++ {
			o, x := out[l*line:(l+1)*line], in[l*line:(l+1)*line]
			if a.blocked {
				hornerPass(o, &ws[b], (l-l0)*((line+3)/4), line, x)
				continue
			}
			dotPass(o, 1, &ws[b], (l-l0)*line, line, x)
		}
	}
}

// dotPassGo is dotPass without assembly.
func dotPassGo(out []float64, stride int, r *windows, first, n int, x []float64) {
	for o := 0; o < n; o++ {
		q := first + o
		if r.single {
			out[o*stride] = dotWindow(r.w32[r.off[q]:r.off[q+1]], x[r.lo[q]:])
		} else {
			out[o*stride] = dotWindow(r.w[r.off[q]:r.off[q+1]], x[r.lo[q]:])
		}
	}
}

// dotWindow returns sum_j w[j] x[j] over w's length, in double precision
// whatever the weights' precision.
func dotWindow[T float32 | float64](w []T, x []float64) float64 {
	x = x[:len(w)]
	var s0, s1 float64
	j := 0
	for ; j+1 < len(w); j += 2 {
		s0 += float64(w[j]) * x[j]
		s1 += float64(w[j+1]) * x[j+1]
	}
	if j < len(w) {
		s0 += float64(w[j]) * x[j]
	}
	return s0 + s1
}
