package sinkhorn

import (
	"fmt"
	"math"
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

// BenchmarkKernel compares one kernel application on 128 x 128 in the two
// representations at the same epsilon: the banded scaling kernel (its
// initial band) and the log-domain kernel on a smooth potential as the
// iteration meets them (a tilted paraboloid, range far beyond exp's). The
// issue's target is log <= 3x scaling.
func BenchmarkKernel(b *testing.B) {
	for _, eps := range []float64{1, 4, 16} {
		b.Run(fmt.Sprintf("scaling/eps=%g", eps), func(b *testing.B) {
			k := newBandKernel(128, 128, 1, 1, eps, initialCutoff)
			src := benchField(128)
			dst, tmp := make([]float64, len(src)), make([]float64, len(src))
			for b.Loop() {
				k.Apply(dst, src, tmp)
			}
		})
		b.Run(fmt.Sprintf("log/eps=%g", eps), func(b *testing.B) {
			k := newLogKernel(128, 128, 1, 1, eps)
			src := make([]float64, 128*128)
			for r := 0; r < 128; r++ {
				for c := 0; c < 128; c++ {
					x, y := float64(c)-50, float64(r)-70
					src[r*128+c] = (-(x*x+y*y)/8 + 3*x) / eps
				}
			}
			dst, tmp := make([]float64, len(src)), make([]float64, len(src))
			scr := newLSEScratch(128, 128)
			for b.Loop() {
				k.apply(dst, src, tmp, scr)
			}
		})
		// Absorbed: built once, then applied to inputs within range, as in
		// the iteration between rebuilds.
		b.Run(fmt.Sprintf("absorbed/eps=%g", eps), func(b *testing.B) {
			a := newAbsKernel(newLogKernel(128, 128, 1, 1, eps), true, true) // as plain balanced solves run it (single-precision windows)
			src := make([]float64, 128*128)
			for r := 0; r < 128; r++ {
				for c := 0; c < 128; c++ {
					x, y := float64(c)-50, float64(r)-70
					src[r*128+c] = (-(x*x+y*y)/8 + 3*x) / eps
				}
			}
			dst, x := make([]float64, len(src)), make([]float64, len(src))
			a.apply(dst, src, x)
			src[0] += 1
			for b.Loop() {
				a.apply(dst, src, x)
			}
		})
	}
}

// BenchmarkBarycenter8x128Plain runs 100 plain iterations on eight
// 128 x 128 blobs at epsilon 16 on the full grid (the per-iteration
// comparison with the peer).
func BenchmarkBarycenter8x128Plain(b *testing.B) {
	var fs []*grid.Field
	for k := 0; k < 8; k++ {
		fs = append(fs, gaussField(128, 128, 40+8*float64(k), 50+5*float64(k%3), 60+20*float64(k%4)))
	}
	for b.Loop() {
		Barycenter(fs, Settings{Epsilon: 16, Relax: 1, Tol: 1e-300, MaxIter: 100, SingleScale: true, Method: MethodScaling})
	}
}

// benchShapes makes k invented fields on an n x n grid: soft rings, tilted
// ellipses and crescents at scattered places and sizes (seeded; in the
// spirit of the shared benchmark fields, made here so that the benchmark
// runs without them).
func benchShapes(k, n int) []*grid.Field {
	rng := rand.New(rand.NewPCG(2, uint64(n)))
	var out []*grid.Field
	for i := range k {
		f := grid.New(n, n)
		s := float64(n)
		cx, cy := s*(0.3+0.4*rng.Float64()), s*(0.3+0.4*rng.Float64())
		r0 := s * (0.1 + 0.1*rng.Float64())
		th := math.Pi * rng.Float64()
		w := math.Max(1.5, s/40)
		for r := range n {
			for c := range n {
				x, y := float64(c)-cx, float64(r)-cy
				xr, yr := x*math.Cos(th)+y*math.Sin(th), -x*math.Sin(th)+y*math.Cos(th)
				var v float64
				switch i % 3 {
				case 0: // ring
					d := math.Hypot(x, y) - r0
					v = math.Exp(-d * d / (2 * w * w))
				case 1: // ellipse
					q := xr*xr/(r0*r0) + yr*yr/(0.3*r0*r0)
					v = math.Exp(-q)
				default: // crescent: a disc minus a shifted disc
					v = math.Exp(-(x*x+y*y)/(r0*r0)) * (1 - math.Exp(-((xr-0.5*r0)*(xr-0.5*r0)+yr*yr)/(0.6*r0*r0)))
				}
				f.Data[r*n+c] = v + 1e-6
			}
		}
		out = append(out, f)
	}
	return out
}

// BenchmarkSolve runs whole solves as the engine issue measures them: eight
// invented fields, tol 1e-6, plain, at the default epsilon (one squared
// pixel) and at 16, at 128^2 (256^2 and 512^2 with -bench 'Solve/.*256'
// and so on; long). It reports the finest-level iterations, whose target is
// at most 100. The ratio to the numpy peer comes from bench/compare.sh.
func BenchmarkSolve(b *testing.B) {
	for _, n := range []int{128, 256, 512} {
		fs := benchShapes(8, n)
		for _, eps := range []float64{0, 16} {
			name := fmt.Sprintf("n=%d/eps=%g", n, eps)
			if eps == 0 {
				name = fmt.Sprintf("n=%d/default", n)
			}
			b.Run(name, func(b *testing.B) {
				var r *Result
				for b.Loop() {
					r, _ = Barycenter(fs, Settings{Epsilon: eps, Tol: 1e-6})
				}
				if r == nil || r.Status != Converged {
					b.Fatal("not converged")
				}
				b.ReportMetric(float64(r.FinestIterations), "finest-iterations")
				b.ReportMetric(float64(r.Iterations), "iterations")
			})
		}
	}
}

// BenchmarkDivergence is the distance command's work: the Sinkhorn
// divergence between two 128 x 128 fields at epsilon 4 (target: at most a
// tenth of the peer's plain barycenter at epsilon 16).
func BenchmarkDivergence(b *testing.B) {
	fs := benchShapes(2, 128)
	for b.Loop() {
		if _, _, err := Divergence(fs[0], fs[1], Settings{Epsilon: 4, Tol: 1e-6}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkDotPass times the window sums of one 128 x 128 pass with
// single-precision weights, every window of the same length, in ns per
// output: lengths that are not a multiple of four cost their tail (now
// masked loads; with a scalar tail 11, 13 and 15 cost 1.2-1.5x the 12).
func BenchmarkDotPass(b *testing.B) {
	for _, l := range []int{8, 11, 12, 13, 15, 16} {
		rng := rand.New(rand.NewPCG(1, 2))
		const n = 128
		r := windows{single: true}
		r.reset()
		for line := 0; line < n; line++ {
			for o := 0; o < n; o++ {
				w := make([]float64, l)
				for j := range w {
					w[j] = rng.Float64()
				}
				r.addScaled(min(max(o-l/2, 0), n-l), w, 1)
			}
		}
		x, out := make([]float64, n*n), make([]float64, n*n)
		b.Run(fmt.Sprintf("len=%d", l), func(b *testing.B) {
			for b.Loop() {
				for line := 0; line < n; line++ {
					dotPass(out[line:], n, &r, line*n, n, x[line*n:(line+1)*n])
				}
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/(n*n), "ns/output")
		})
	}
}

// BenchmarkAbsorbedSides applies one absorbed instance (epsilon 1, single
// precision, built once) at power-of-two sides and one beside them, in ns
// per pixel: a layout whose lines share cache sets at 256 and 512 shows as
// a jump against 500.
func BenchmarkAbsorbedSides(b *testing.B) {
	for _, n := range []int{256, 500, 512} {
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			a := newAbsKernel(newLogKernel(n, n, 1, 1, 1), true, true)
			src := make([]float64, n*n)
			for r := 0; r < n; r++ {
				for c := 0; c < n; c++ {
					x, y := float64(c)-0.4*float64(n), float64(r)-0.55*float64(n)
					src[r*n+c] = -(x*x+y*y)/8 + 3*x
				}
			}
			dst, x := make([]float64, len(src)), make([]float64, len(src))
			a.apply(dst, src, x)
			src[0] += 1
			for b.Loop() {
				a.apply(dst, src, x)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*n*n), "ns/px")
		})
	}
}
