package sinkhorn

import (
	"math"
	"sync"
)

// padPool holds the zero-padded row of Apply's pass along x.
var padPool = sync.Pool{New: func() any { return new([]float64) }}

// bandKernel applies the Gibbs kernel K(p, q) = exp(-|p - q|^2 / epsilon) of the
// squared Euclidean cost on a rows x cols grid with pixel size (dx, dy). It
// factorises into a kernel along x and one along y (K f = Ky f Kx^T), both
// symmetric Toeplitz, so it is stored as two vectors of taps and applied as
// two 1-D passes: O(rows*cols*(rx+ry)) work, never an N x N matrix.
//
// The taps are cut where they fall below Cutoff. The a-priori bound on the
// error, Cutoff * |f|_1 * |g|_1 for the pairing <g, K f>, is useless when
// the scalings span 1e+-100, so the solver measures the error against the
// untruncated kernel instead (scalingIter.verify) and widens the band when
// it matters.
type bandKernel struct {
	Rows, Cols int
	Dx, Dy     float64
	Epsilon    float64
	// Cutoff is the smallest kernel value kept (relative to K(p, p) = 1).
	Cutoff float64
	kx, ky []float64 // full symmetric windows, length 2r+1
	rx, ry int
	px, py []float64 // the same with 3 zeros on either side (bandPass)
}

// newBandKernel returns the kernel for the given grid and epsilon, truncated at
// cutoff (0 keeps every tap).
func newBandKernel(rows, cols int, dx, dy, eps, cutoff float64) *bandKernel {
	k := &bandKernel{Rows: rows, Cols: cols, Dx: dx, Dy: dy, Epsilon: eps, Cutoff: cutoff}
	k.kx, k.rx = taps(cols, dx, eps, cutoff)
	k.ky, k.ry = taps(rows, dy, eps, cutoff)
	k.px, k.py = padTaps(k.kx), padTaps(k.ky)
	return k
}

// padTaps returns taps with 3 zeros on either side (bandPass's padded).
func padTaps(t []float64) []float64 {
	return append(append(make([]float64, 3, len(t)+6), t...), 0, 0, 0)
}

// taps returns exp(-(h t)^2/eps) for t in [-r, r], r the largest offset whose
// value is at least cutoff (at most n-1).
func taps(n int, h, eps, cutoff float64) ([]float64, int) {
	r := n - 1
	if cutoff > 0 {
		// exp(-h^2 t^2/eps) >= cutoff  <=>  t <= sqrt(-eps ln cutoff)/h
		rf := math.Sqrt(-eps*math.Log(cutoff)) / h
		if rf < float64(r) {
			r = int(rf)
		}
	}
	w := make([]float64, 2*r+1)
	for t := -r; t <= r; t++ {
		d := h * float64(t)
		w[t+r] = math.Exp(-d * d / eps)
	}
	return w, r
}

// Apply writes K src to dst (both rows*cols, row-major), using tmp of the
// same size as scratch. dst and src must not overlap.
func (k *bandKernel) Apply(dst, src, tmp []float64) {
	// Along y as contiguous row-axpys (bandPass). Along x, with AVX2 and a
	// band up to conv1dReach, each row is correlated with the taps in
	// registers (conv1d); otherwise transpose, the same pass along y,
	// transpose back: the transposes cost
	// less than strided dot products along rows, and less than axpys of
	// each row against itself shifted (measured: 100 iterations on
	// 8 x 128^2 took 1.0-1.4 s this way, 1.7-2.2 s shifted).
	bandPass(tmp, src, k.Rows, k.Cols, k.ky, k.py, k.ry)
	if useAVX && k.Cols >= 32 && k.rx <= conv1dReach {
		// Along x without transposes: each row, padded with zeros, is
		// correlated with the taps 32 outputs at a time (conv1d).
		buf := padPool.Get().(*[]float64)
		if cap(*buf) < k.Cols+2*k.rx {
			*buf = make([]float64, k.Cols+2*k.rx)
		}
		pad := (*buf)[:k.Cols+2*k.rx]
		clear(pad)
		for r := 0; r < k.Rows; r++ {
			copy(pad[k.rx:], tmp[r*k.Cols:(r+1)*k.Cols])
			out := dst[r*k.Cols : (r+1)*k.Cols]
			for c := conv1d(out, pad, k.kx); c < k.Cols; c++ {
				s := 0.0
				for t, w := range k.kx {
					s += w * pad[c+t]
				}
				out[c] = s
			}
		}
		padPool.Put(buf)
		return
	}
	transpose(dst, tmp, k.Rows, k.Cols)
	bandPass(tmp, dst, k.Cols, k.Rows, k.kx, k.px, k.rx)
	transpose(dst, tmp, k.Cols, k.Rows)
}

// transposes reports whether Apply transposes for its pass along x.
func (k *bandKernel) transposes() bool {
	return !(useAVX && k.Cols >= 32 && k.rx <= conv1dReach)
}

// applyNT is Apply with dst left transposed (cols x rows), and applyTN is
// Apply from a transposed src to a row-major dst: one transpose each
// instead of Apply's two. An iteration that keeps one side's scalings
// transposed (scalingIter.tr) takes them. applyNT's sums run as Apply's;
// applyTN's run along x first.
func (k *bandKernel) applyNT(dst, src, tmp []float64) {
	bandPass(dst, src, k.Rows, k.Cols, k.ky, k.py, k.ry)
	transpose(tmp, dst, k.Rows, k.Cols)
	bandPass(dst, tmp, k.Cols, k.Rows, k.kx, k.px, k.rx)
}

func (k *bandKernel) applyTN(dst, src, tmp []float64) {
	bandPass(dst, src, k.Cols, k.Rows, k.kx, k.px, k.rx)
	transpose(tmp, dst, k.Cols, k.Rows)
	bandPass(dst, tmp, k.Rows, k.Cols, k.ky, k.py, k.ry)
}

// conv1dReach is the widest band (taps on either side) that the x pass
// takes by conv1d; wider ones transpose and take bandPass, whose input
// loads are aligned and serve four outputs each (conv1d's unaligned loads
// cross cache lines 3 times in 8). Measured after the transposes went to
// column strips (BenchmarkKernel/scaling, same run): 128^2, 13 taps a side
// (epsilon 1) 50-58 us by conv1d, 46-48 us with transposes; 27 (epsilon 4)
// 99-103 against 79-82; 54 (epsilon 16) 129-133 either way as before. At
// 256^2 conv1d keeps a lead on narrow bands (6 and 13 taps: 1.7 against 2.1
// and 3.2 against 3.7 ns per pixel) and 27 taps are even.
const conv1dReach = 20

// bandPass is axpyPass with four output rows and eight columns at a time
// held in registers (band4), where the CPU has AVX2 and FMA: each input row
// is read once per four outputs instead of twice per two taps of each, and
// no output is read back. It takes every tap, not pairs (the symmetry saved
// multiplies but cost loads). padded is taps with 3 zeros on either side,
// so that the four rows share one run of input rows. Columns beyond the
// last multiple of 8, and the last n mod 4 rows, take the loop below.
// Measured with conv1d at 128^2 (BenchmarkKernel/scaling, same run): 0.10
// -> 0.070 ms at epsilon 1, 0.40-0.45 -> 0.23-0.26 ms at 16.
func bandPass(dst, src []float64, n, m int, taps, padded []float64, R int) {
	c8 := m &^ 7
	r := 0
	if c8 > 0 && n >= 4 {
		for ; r+4 <= n; r += 4 {
			j0, j1 := max(0, r-R), min(n-1, r+3+R)
			if !band4(dst[r*m:], src[j0*m:], m, c8, padded, j0-r+R+3, j1-j0+1) {
				break
			}
			for q := r; q < r+4; q++ {
				bandTail(dst, src, n, m, taps, R, q, c8)
			}
		}
	}
	if r == 0 {
		axpyPass(dst, src, n, m, taps, R)
		return
	}
	for ; r < n; r++ {
		bandTail(dst, src, n, m, taps, R, r, 0)
	}
}

// bandTail writes row q of a banded pass from column c0 on.
func bandTail(dst, src []float64, n, m int, taps []float64, R, q, c0 int) {
	j0, j1 := max(0, q-R), min(n-1, q+R)
	for c := c0; c < m; c++ {
		s := 0.0
		for j := j0; j <= j1; j++ {
			s += taps[j-q+R] * src[j*m+c]
		}
		dst[q*m+c] = s
	}
}

// axpyPass: dst[r', :] = sum_r w(r - r') src[r, :] for an n x m array,
// as row-axpys on contiguous rows. The kernel is symmetric, so rows at equal
// distance above and below share one multiply (pairs of taps at a time);
// taps that reach past only one border are added four rows at a time.
func axpyPass(dst, src []float64, n, m int, taps []float64, R int) {
	k := taps[R:] // k[t] = w(t), t >= 0
	row := func(j int) []float64 { return src[j*m : (j+1)*m] }
	for r := 0; r < n; r++ {
		out := dst[r*m : (r+1)*m]
		axpySet(out, k[0], row(r))
		both := min(R, r, n-1-r)
		t := 1
		for ; t+1 <= both; t += 2 {
			axpyPair2(out, k[t], k[t+1], row(r-t), row(r+t), row(r-t-1), row(r+t+1))
		}
		for ; t <= both; t++ {
			axpyPair1(out, k[t], row(r-t), row(r+t))
		}
		// One-sided taps: below r when r is near the top border, above it
		// when near the bottom (at most one of the two ranges is non-empty
		// beyond both).
		lo, hi := both+1, min(R, r)
		for t = lo; t+3 <= hi; t += 4 {
			axpy4r(out, k[t], k[t+1], k[t+2], k[t+3], row(r-t), row(r-t-1), row(r-t-2), row(r-t-3))
		}
		for ; t <= hi; t++ {
			axpy1(out, k[t], row(r-t))
		}
		lo, hi = both+1, min(R, n-1-r)
		for t = lo; t+3 <= hi; t += 4 {
			axpy4r(out, k[t], k[t+1], k[t+2], k[t+3], row(r+t), row(r+t+1), row(r+t+2), row(r+t+3))
		}
		for ; t <= hi; t++ {
			axpy1(out, k[t], row(r+t))
		}
	}
}

func axpySet(out []float64, w float64, s []float64) {
	s = s[:len(out)]
	for c := range out {
		out[c] = w * s[c]
	}
}

func axpy1(out []float64, w float64, s []float64) {
	s = s[:len(out)]
	for c := range out {
		out[c] += w * s[c]
	}
}
