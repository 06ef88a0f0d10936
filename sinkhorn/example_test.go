package sinkhorn_test

import (
	"fmt"
	"math"

	"barygrid/grid"
	"barygrid/sinkhorn"
)

func blob(mx, my float64) *grid.Field {
	f := grid.New(32, 32)
	for r := 0; r < 32; r++ {
		for c := 0; c < 32; c++ {
			x, y := float64(c)-mx, float64(r)-my
			f.Set(r, c, math.Exp(-(x*x+y*y)/8))
		}
	}
	return f
}

// The barycenter of two translates of a blob is the blob halfway between
// them, not two half-height ghosts; the plain entropic barycenter (the
// default) blurs it by epsilon/2 in variance (4 + 2/2).
func ExampleBarycenter() {
	res, err := sinkhorn.Barycenter([]*grid.Field{blob(10, 12), blob(20, 16)}, sinkhorn.Settings{Epsilon: 2})
	if err != nil {
		panic(err)
	}
	m := grid.ComputeMoments(res.Barycenter)
	fmt.Println(res.Status)
	fmt.Printf("centroid (%.2f, %.2f), variance %.2f\n", m.Mean[0], m.Mean[1], m.Cov[0][0])
	// Output:
	// converged
	// centroid (15.00, 14.00), variance 5.00
}

// The Sinkhorn divergence between a field and its translate is the squared
// length of the translation.
func ExampleDivergence() {
	d, _, err := sinkhorn.Divergence(blob(12, 12), blob(15, 16), sinkhorn.Settings{Epsilon: 1, Tol: 1e-9})
	if err != nil {
		panic(err)
	}
	fmt.Printf("%.3f\n", d)
	// Output: 25.000
}
