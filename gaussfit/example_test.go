package gaussfit_test

import (
	"fmt"

	"barygrid/gaussfit"

	"gonum.org/v1/gonum/mat"
)

// Two Gaussians with commuting covariances: the barycenter's standard
// deviations (3 = (2+4)/2 and 2 = (1+3)/2) are the weighted means of theirs.
func ExampleBarycenter() {
	a := gaussfit.Gaussian{Mean: []float64{0, 0}, Cov: mat.NewSymDense(2, []float64{4, 0, 0, 1})}
	b := gaussfit.Gaussian{Mean: []float64{6, 3}, Cov: mat.NewSymDense(2, []float64{16, 0, 0, 9})}
	r, err := gaussfit.Barycenter([]gaussfit.Gaussian{a, b}, gaussfit.Settings{Weights: []float64{1, 1}})
	if err != nil {
		panic(err)
	}
	c := r.Barycenter.Cov
	fmt.Printf("mean %.1f, variances %.1f and %.1f\n", r.Barycenter.Mean, c.At(0, 0), c.At(1, 1))
	fmt.Printf("W2^2(a, b) = %.1f\n", gaussfit.W2Sq(a, b))
	// Output:
	// mean [3.0 1.5], variances 9.0 and 4.0
	// W2^2(a, b) = 53.0
}
