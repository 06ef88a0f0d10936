package sinkhorn

import (
	"math/rand/v2"
	"testing"

	"barygrid/grid"
)

func benchField(n int) []float64 {
	rng := rand.New(rand.NewPCG(1, 2))
	f := make([]float64, n*n)
	for i := range f {
		f[i] = rng.Float64()
	}
	return f
}

// BenchmarkKernelApply128 times one banded kernel application on 128 x 128
// at epsilon 16 (the setting of the peer comparison).
func BenchmarkKernelApply128(b *testing.B) {
	k := NewKernel(128, 128, 1, 1, 16, 1e-12)
	src := benchField(128)
	dst, tmp := make([]float64, len(src)), make([]float64, len(src))
	for b.Loop() {
		k.Apply(dst, src, tmp)
	}
}

func BenchmarkLogKernelApply128(b *testing.B) {
	k := NewLogKernel(128, 128, 1, 1, 4)
	src := benchField(128)
	for i := range src {
		src[i] *= 100
	}
	dst, tmp := make([]float64, len(src)), make([]float64, len(src))
	for b.Loop() {
		k.Apply(dst, src, tmp)
	}
}

// BenchmarkBarycenter8x128Plain runs 100 plain iterations on eight
// 128 x 128 blobs at epsilon 16 (the per-iteration comparison with the peer).
func BenchmarkBarycenter8x128Plain(b *testing.B) {
	var fs []*grid.Field
	for k := 0; k < 8; k++ {
		fs = append(fs, gaussField(128, 128, 40+8*float64(k), 50+5*float64(k%3), 60+20*float64(k%4)))
	}
	for b.Loop() {
		Barycenter(fs, Settings{Epsilon: 16, Plain: true, Relax: 1, Tol: 1e-300, MaxIter: 100})
	}
}

// BenchmarkLogKernelSmooth128 applies the log-domain kernel (epsilon 2) to a
// smooth potential, as the iteration meets them (a tilted paraboloid).
func BenchmarkLogKernelSmooth128(b *testing.B) {
	k := NewLogKernel(128, 128, 1, 1, 2)
	src := make([]float64, 128*128)
	for r := 0; r < 128; r++ {
		for c := 0; c < 128; c++ {
			x, y := float64(c)-50, float64(r)-70
			src[r*128+c] = -(x*x+y*y)/8 + 3*x
		}
	}
	dst, tmp := make([]float64, len(src)), make([]float64, len(src))
	for b.Loop() {
		k.Apply(dst, src, tmp)
	}
}
