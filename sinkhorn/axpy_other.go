//go:build !amd64

package sinkhorn

// useAVX: the assembly routines exist on amd64 only.
const useAVX = false

func axpyPair2(out []float64, w0, w1 float64, a0, b0, a1, b1 []float64) {
	a0, b0, a1, b1 = a0[:len(out)], b0[:len(out)], a1[:len(out)], b1[:len(out)]
	for c := range out {
		out[c] += w0*(a0[c]+b0[c]) + w1*(a1[c]+b1[c])
	}
}

func axpy4r(out []float64, w0, w1, w2, w3 float64, s0, s1, s2, s3 []float64) {
	s0, s1, s2, s3 = s0[:len(out)], s1[:len(out)], s2[:len(out)], s3[:len(out)]
	for c := range out {
		out[c] += w0*s0[c] + w1*s1[c] + w2*s2[c] + w3*s3[c]
	}
}

func axpyPair1(out []float64, w float64, a, b []float64) {
	a, b = a[:len(out)], b[:len(out)]
	for c := range out {
		out[c] += w * (a[c] + b[c])
	}
}

func band4(out, src []float64, stride, cols int, wp []float64, wi, nj int) bool { return false }

func conv1d(out, in, w []float64) int { return 0 }

func transpose(dst, src []float64, rows, cols int) { transposeGo(dst, src, rows, cols, 0, 0) }

// useAVX512: band4's 512-bit form exists on amd64 only.
var useAVX512 = false
