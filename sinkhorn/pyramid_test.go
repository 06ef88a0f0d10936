package sinkhorn

import (
	"math"
	"math/rand/v2"
	"testing"

	"barygrid/grid"
)

// The coarse-to-fine solve (pyramid, epsilon stages, representation chosen
// per stage) reaches the same barycenter as a single-scale log-domain solve
// run to a tight tolerance, for every kind of problem: plain and debiased,
// balanced and unbalanced, masked, weighted, anisotropic pixels and odd
// sizes (the answer is the unique fixed point of the same equations, Benamou
// et al. 2015; only the path to it differs).
func TestPyramidAgreesWithSingleScale(t *testing.T) {
	const rows, cols = 37, 29
	mk := func(mx, my, s2, mass float64) *grid.Field {
		f := gaussField(rows, cols, mx, my, s2)
		f = grid.Scale(f, mass/f.Mass())
		f.Dx, f.Dy = 1, 1.3
		return f
	}
	fs := []*grid.Field{mk(8, 9, 6, 1), mk(20, 25, 9, 1.5), mk(14, 12, 4, 0.8)}
	mask := grid.New(rows, cols)
	for i := range mask.Data {
		if i%cols < 26 {
			mask.Data[i] = 1
		}
	}
	mask.Dx, mask.Dy = 1, 1.3
	cases := []struct {
		name string
		s    Settings
	}{
		{"plain", Settings{}},
		{"weights", Settings{Weights: []float64{0.2, 0.5, 0.3}}},
		{"debiased", Settings{Debias: true}},
		{"masked", Settings{Mask: mask, DropOutside: true}},
		{"unbalanced", Settings{Unbalanced: 20}},
		// At the default tolerance plain balanced solves keep their
		// windows in single precision, in blocks (horner.go).
		{"plain, tol 1e-6", Settings{Tol: 1e-6}},
		{"masked, weights, tol 1e-6", Settings{Mask: mask, DropOutside: true, Weights: []float64{0.2, 0.5, 0.3}, Tol: 1e-6}},
	}
	for _, c := range cases {
		c.s.Epsilon, c.s.MaxIter = 1.5, 100000
		ref := c.s
		ref.SingleScale, ref.Method, ref.Tol = true, MethodLog, 1e-11
		got := c.s
		got.Tol = 1e-9
		if c.s.Tol != 0 {
			got.Tol = c.s.Tol
		}
		if c.s.Debias {
			// The debiasing field converges sublinearly.
			ref.Tol, got.Tol = 1e-9, 1e-8
		}
		if c.s.Unbalanced > 0 {
			// Its violation is divided by 1 - lambda (slow mass mode).
			ref.Tol = 1e-9
		}
		a, err := Barycenter(fs, ref)
		if err != nil {
			t.Fatalf("%s reference: %v", c.name, err)
		}
		if a.Status != Converged {
			t.Fatalf("%s reference: %v", c.name, a.Message)
		}
		b, err := Barycenter(fs, got)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if b.Status != Converged {
			t.Fatalf("%s: %v", c.name, b.Message)
		}
		var l1, m float64
		for i := range a.Barycenter.Data {
			l1 += math.Abs(a.Barycenter.Data[i] - b.Barycenter.Data[i])
			m += a.Barycenter.Data[i]
		}
		l1 /= m
		t.Logf("%s: L1 %.2g; finest-level iterations %d (pyramid, %d levels) against %d (single scale)", c.name, l1, b.FinestIterations, b.Levels, a.FinestIterations)
		if l1 > 1e-5 {
			t.Errorf("%s: pyramid result differs from the single-scale one by L1 %g", c.name, l1)
		}
	}
}

// A coarse-to-fine solve needs fewer iterations on the full grid than a
// cold single-scale one (a count, not a time).
func TestPyramidSavesFinestIterations(t *testing.T) {
	var fs []*grid.Field
	for k := 0; k < 4; k++ {
		fs = append(fs, gaussField(96, 96, 25+12*float64(k), 30+9*float64(k%3), 20+10*float64(k%2)))
	}
	s := Settings{Epsilon: 2, Tol: 1e-7}
	py, err := Barycenter(fs, s)
	if err != nil || py.Status != Converged {
		t.Fatal(err, py.Message)
	}
	s.SingleScale = true
	single, err := Barycenter(fs, s)
	if err != nil || single.Status != Converged {
		t.Fatal(err, single.Message)
	}
	t.Logf("finest-level iterations: pyramid %d (%d levels), single scale %d", py.FinestIterations, py.Levels, single.FinestIterations)
	if py.FinestIterations >= single.FinestIterations {
		t.Errorf("pyramid %d finest iterations, single scale %d", py.FinestIterations, single.FinestIterations)
	}
}

// The separable cubic upsampling equals interp's pixel-by-pixel definition
// on finite arrays (odd sizes, clamped borders), and away from the borders
// it reproduces a quadratic exactly (Catmull-Rom is the cubic convolution
// with a = -1/2, which reproduces quadratics: Keys, IEEE Trans. ASSP 29(6),
// 1981).
func TestUpsampleSeparable(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, sz := range [][2]int{{8, 8}, {9, 13}, {16, 11}} {
		c := &level{rows: sz[0], cols: sz[1], n: sz[0] * sz[1]}
		f := &level{rows: 2*sz[0] - 1, cols: 2 * sz[1], n: (2*sz[0] - 1) * 2 * sz[1]}
		x, quad := make([]float64, c.n), make([]float64, c.n)
		for i := range x {
			x[i] = 100 * (rng.Float64() - 0.5)
			r, q := float64(i/c.cols), float64(i%c.cols)
			quad[i] = 0.3*r*r - 0.2*r*q + 0.7*q*q + 2*r - q + 5
		}
		got := upsampleSeparable(x, c, f)
		gq := upsampleSeparable(quad, c, f)
		for r := range f.rows {
			y := math.Min(math.Max((float64(r)-0.5)/2, 0), float64(c.rows-1))
			for q := range f.cols {
				xx := math.Min(math.Max((float64(q)-0.5)/2, 0), float64(c.cols-1))
				want := interp(x, c.rows, c.cols, y, xx)
				if d := math.Abs(got[r*f.cols+q] - want); d > 1e-12*math.Max(1, math.Abs(want)) {
					t.Fatalf("%v: pixel (%d,%d) %.17g, interp %.17g", sz, r, q, got[r*f.cols+q], want)
				}
				if y >= 1 && y <= float64(c.rows-2) && xx >= 1 && xx <= float64(c.cols-2) {
					wq := 0.3*y*y - 0.2*y*xx + 0.7*xx*xx + 2*y - xx + 5
					if d := math.Abs(gq[r*f.cols+q] - wq); d > 1e-11*math.Abs(wq) {
						t.Fatalf("%v: quadratic at (%g,%g) %.17g, want %.17g", sz, y, xx, gq[r*f.cols+q], wq)
					}
				}
			}
		}
	}
}

// A relaxed scaling stage that leaves its range moves to the log domain
// with the relaxation kept: run again unrelaxed, the full-grid stage of
// eight invented shapes at 40^2 and 48^2 took the plain iteration's count
// (353 and 461 full-grid iterations, against 71 and 72 relaxed in the log
// domain; 8 make_fields inputs of 40^2 and 48^2: 1353 and 1878, against
// 117 and 134). A count, not a time; the answer is checked against the
// single-scale log-domain solve run tight (the unique fixed point of the
// same equations, Benamou et al. 2015).
func TestFailedScalingStageKeepsRelaxation(t *testing.T) {
	for _, n := range []int{40, 48} {
		fs := benchShapes(8, n)
		got, err := Barycenter(fs, Settings{})
		if err != nil || got.Status != Converged {
			t.Fatal(n, err, got.Message)
		}
		t.Logf("%d^2: %d full-grid iterations, fell back to the log domain: %v", n, got.FinestIterations, got.FellBackToLog)
		if !got.FellBackToLog {
			t.Errorf("%d^2: no scaling stage failed; the test no longer covers the fallback", n)
		}
		if got.FinestIterations > 150 {
			t.Errorf("%d^2: %d full-grid iterations, want at most 150", n, got.FinestIterations)
		}
		ref, err := Barycenter(fs, Settings{SingleScale: true, Method: MethodLog, Tol: 1e-11, MaxIter: 100000})
		if err != nil || ref.Status != Converged {
			t.Fatal(n, err, ref.Message)
		}
		l1 := 0.0
		for i, x := range ref.Barycenter.Data {
			l1 += math.Abs(x - got.Barycenter.Data[i])
		}
		if l1 > 1e-5 {
			t.Errorf("%d^2: L1 %g from the single-scale log-domain solve", n, l1)
		}
	}
}
