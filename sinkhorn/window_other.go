//go:build !amd64

package sinkhorn

func dotPass(out []float64, stride int, r *windows, first, n int, x []float64) {
	dotPassGo(out, stride, r, first, n, x)
}

func hornerBlocks(out []float64, r *windows, b, nb int, x []float64) int { return 0 }
