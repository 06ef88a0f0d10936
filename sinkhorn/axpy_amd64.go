package sinkhorn

import "golang.org/x/sys/cpu"

// The two inner loops of the banded kernel take 65% of a barycenter's time;
// with AVX2 and FMA they run four lanes at a time. FMA rounds once where the
// portable loop rounds twice, so results differ from other machines in the
// last bits (the tests compare with tolerances, and results stay identical
// for any number of threads on one machine).
var useAVX = cpu.X86.HasAVX2 && cpu.X86.HasFMA

//go:noescape
func pair2AVX(out, a0, b0, a1, b1 *float64, n int, w0, w1 float64)

//go:noescape
func quad4AVX(out, s0, s1, s2, s3 *float64, n int, w0, w1, w2, w3 float64)

func axpyPair2(out []float64, w0, w1 float64, a0, b0, a1, b1 []float64) {
	n := len(out)
	a0, b0, a1, b1 = a0[:n], b0[:n], a1[:n], b1[:n]
	done := 0
	if useAVX && n >= 4 {
		done = n &^ 3
		pair2AVX(&out[0], &a0[0], &b0[0], &a1[0], &b1[0], done, w0, w1)
	}
	for c := done; c < n; c++ {
		out[c] += w0*(a0[c]+b0[c]) + w1*(a1[c]+b1[c])
	}
}

func axpy4r(out []float64, w0, w1, w2, w3 float64, s0, s1, s2, s3 []float64) {
	n := len(out)
	s0, s1, s2, s3 = s0[:n], s1[:n], s2[:n], s3[:n]
	done := 0
	if useAVX && n >= 4 {
		done = n &^ 3
		quad4AVX(&out[0], &s0[0], &s1[0], &s2[0], &s3[0], done, w0, w1, w2, w3)
	}
	for c := done; c < n; c++ {
		out[c] += w0*s0[c] + w1*s1[c] + w2*s2[c] + w3*s3[c]
	}
}

//go:noescape
func pair1AVX(out, a, b *float64, n int, w float64)

func axpyPair1(out []float64, w float64, a, b []float64) {
	n := len(out)
	a, b = a[:n], b[:n]
	done := 0
	if useAVX && n >= 4 {
		done = n &^ 3
		pair1AVX(&out[0], &a[0], &b[0], done, w)
	}
	for c := done; c < n; c++ {
		out[c] += w * (a[c] + b[c])
	}
}

//go:noescape
func band4AVX(out, src *float64, stride, cols int, w *float64, nj int)

//go:noescape
func band4Z(out, src *float64, stride, cols int, w *float64, nj int)

// useAVX512 takes band4's 512-bit form where the CPU (and the OS) support
// AVX-512F: twice the lanes per multiply-add for the passes that are most
// of a solve at large epsilon (BenchmarkSolve/n=128/eps=16 95-107 -> 76-78
// ms on such a machine).
var useAVX512 = useAVX && cpu.X86.HasAVX512F

// band4 writes four rows of a banded pass (see bandPass) over the first
// cols columns, a multiple of 8, and reports whether it could. The sums of
// each output are the same fused multiply-adds in the same order in either
// form, so the result does not depend on which one ran.
func band4(out, src []float64, stride, cols int, wp []float64, wi, nj int) bool {
	if !useAVX {
		return false
	}
	_ = out[3*stride+cols-1]
	_ = src[(nj-1)*stride+cols-1]
	_ = wp[wi-3]
	_ = wp[wi+nj-1]
	c := 0
	if useAVX512 && cols >= 16 {
		c = cols &^ 15
		band4Z(&out[0], &src[0], stride, c, &wp[wi], nj)
	}
	if c < cols {
		band4AVX(&out[c], &src[c], stride, cols-c, &wp[wi], nj)
	}
	return true
}

//go:noescape
func conv1dAVX(out, in *float64, n int, w *float64, nt int)

// conv1d writes out[c] = sum_t w[t] in[c+t] for c below the largest
// multiple of 32 in len(out) and returns that count (0 without AVX2).
func conv1d(out, in, w []float64) int {
	n := len(out) &^ 31
	if !useAVX || n == 0 || len(w) == 0 {
		return 0
	}
	_ = in[n-1+len(w)-1]
	conv1dAVX(&out[0], &in[0], n, &w[0], len(w))
	return n
}

//go:noescape
func transpose8AVX(dst, src *float64, rows, cols, r4 int)

// transpose writes the cols x rows transpose of src (rows x cols, row-major)
// to dst where the CPU has AVX2: strips of eight columns, walked down four
// rows at a time by 4 x 4 tiles in registers (transpose8AVX), the rest by
// transposeGo. Strips of four rows walked across (transpose4AVX) wrote 32
// of each destination line's 64 bytes per strip; at sides of 128, 256 and
// 512 the destination rows map to a few cache sets, so the lines left the
// cache between the halves (1.0, 1.6, 2.1 ns per element against 0.19 at
// 200).
func transpose(dst, src []float64, rows, cols int) {
	c8 := cols &^ 7
	r4 := rows &^ 3
	if !useAVX || c8 == 0 || r4 == 0 {
		transposeGo(dst, src, rows, cols, 0, 0)
		return
	}
	_, _ = dst[rows*cols-1], src[rows*cols-1]
	for c := 0; c < c8; c += 8 {
		transpose8AVX(&dst[c*rows], &src[c], rows, cols, r4)
	}
	transposeGo(dst, src, rows, cols, r4, c8)
}
