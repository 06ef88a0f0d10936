package sinkhorn

import (
	"math"
	"math/rand/v2"
	"testing"
)

// Blocked windows against the definition: for lines of random potentials
// (smooth, two-peaked, with holes of zero mass) lseLine's log-sums and the
// blocked application to random positive inputs x equal the full sums
//
//	log sum_j exp(h_j - c (i - j)^2)  and  sum_j exp(h_j - c (i - j)^2 - out_i) x_j
//
// to the rounding of single-precision coefficients (2^-24 each, standard
// rounding fact; the terms dropped are below exp(-singleDrop)), whether
// the blocks run in assembly or not, regular or irregular (maximisers that
// jump, large c), on lines whose length is not a multiple of four.
func TestBlockedWindows(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	irregular, regular := 0, 0
	for trial := range 60 {
		n := 8 + rng.IntN(90)
		c := []float64{0.3, 1, 2.5, 9, 40}[trial%5]
		h := make([]float64, n)
		p1, p2 := rng.Float64()*float64(n), rng.Float64()*float64(n)
		for j := range h {
			x := float64(j)
			switch trial % 3 {
			case 0: // smooth, tilted
				h[j] = -0.3*c*(x-p1)*(x-p1) + 5*rng.Float64()
			case 1: // two peaks: the maximiser jumps
				h[j] = math.Max(-c*(x-p1)*(x-p1)/2, -c*(x-p2)*(x-p2)/3+40)
			default: // rough, with holes
				h[j] = 60 * rng.Float64()
				if rng.Float64() < 0.2 {
					h[j] = math.Inf(-1)
				}
			}
		}
		xs := make([]float64, n)
		for j := range xs {
			xs[j] = math.Exp(25 * (2*rng.Float64() - 1))
		}
		for _, asm := range []bool{true, false} {
			w := windows{single: true, blocked: true, hp: hornerPowers(c, n)}
			w.reset()
			out := make([]float64, n)
			s := newLSEScratch(n, n)
			lseLine(out, h, c, singleDrop, s, &w)
			got := make([]float64, n)
			if asm {
				hornerPass(got, &w, 0, n, xs) // assembly where the CPU has AVX2
			} else {
				for b := range (n + 3) / 4 {
					hornerBlockGo(got, &w, b, 4*b, n, xs)
				}
			}
			for b := range (n + 3) / 4 {
				if w.j0[b] < 0 {
					irregular++
				} else {
					regular++
				}
			}
			for i := range n {
				var full, fx, scale float64
				for j, hj := range h {
					if hj == math.Inf(-1) {
						continue
					}
					d := float64(i - j)
					e := math.Exp(hj - c*d*d - out[i])
					full += e
					fx += e * xs[j]
					scale = math.Max(scale, e*xs[j])
				}
				if e := math.Abs(math.Log(full)); e > 2e-7 {
					t.Fatalf("trial %d (n %d, c %g, asm %v): output %d: log-sum off by %.3g", trial, n, c, asm, i, e)
				}
				// Each term's weight within 2^-24 of itself, and terms
				// dropped below exp(-singleDrop) of the largest weight,
				// times the spread of x.
				if e := math.Abs(got[i]-fx) / fx; e > 2e-7 {
					t.Fatalf("trial %d (n %d, c %g, asm %v): output %d: %.15g, full sum %.15g (relative %.3g)", trial, n, c, asm, i, got[i], fx, e)
				}
			}
		}
	}
	if irregular == 0 || regular == 0 {
		t.Fatalf("%d regular and %d irregular blocks: both kinds must be tried", regular, irregular)
	}
	t.Logf("%d regular, %d irregular blocks", regular, irregular)
}
