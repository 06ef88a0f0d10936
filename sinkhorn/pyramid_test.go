package sinkhorn

import (
	"math"
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
	}
	for _, c := range cases {
		c.s.Epsilon, c.s.MaxIter = 1.5, 100000
		ref := c.s
		ref.SingleScale, ref.Method, ref.Tol = true, MethodLog, 1e-11
		got := c.s
		got.Tol = 1e-9
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
