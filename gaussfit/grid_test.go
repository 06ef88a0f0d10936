package gaussfit

import (
	"testing"

	"barygrid/grid"
	"barygrid/sinkhorn"
)

// Fields that are sampled Gaussians: the Gaussian barycenter of their fits
// equals the moments of the debiased entropic grid barycenter (for Gaussian
// inputs the W2 barycenter is the Bures-Wasserstein one, Agueh & Carlier
// 2011, and debiasing removes the entropic blur, Janati et al. 2020), within
// W2^2 of 1e-4 px^2 on a 48 x 48 grid at epsilon 2 px^2.
func TestFitMatchesGridBarycenter(t *testing.T) {
	truths := []Gaussian{
		{Mean: []float64{18, 20}, Cov: sym(12, 3, 8)},
		{Mean: []float64{28, 26}, Cov: sym(6, -2, 14)},
		{Mean: []float64{22, 30}, Cov: sym(9, 0, 9)},
	}
	var fields []*grid.Field
	var fits []Gaussian
	for _, g := range truths {
		f := Render(g, 48, 48, 1, 1, 1)
		fields = append(fields, f)
		h, _, err := Fit(f, FitSettings{})
		if err != nil {
			t.Fatal(err)
		}
		fits = append(fits, h)
	}
	gb, err := Barycenter(fits, Settings{})
	if err != nil {
		t.Fatal(err)
	}
	r, err := sinkhorn.Barycenter(fields, sinkhorn.Settings{Epsilon: 2, Tol: 1e-7, Debias: true})
	if err != nil {
		t.Fatal(err)
	}
	m := grid.ComputeMoments(r.Barycenter)
	got := Gaussian{Mean: []float64{m.Mean[0], m.Mean[1]}, Cov: sym(m.Cov[0][0], m.Cov[0][1], m.Cov[1][1])}
	if d := W2Sq(got, gb.Barycenter); d > 1e-4 {
		t.Errorf("grid barycenter moments %v %v vs Gaussian barycenter %v %v: W2^2 %g",
			got.Mean, got.Cov.RawSymmetric().Data, gb.Barycenter.Mean, gb.Barycenter.Cov.RawSymmetric().Data, d)
	}
	t.Logf("W2^2 between the two: %.3g px^2 (%d iterations)", W2Sq(got, gb.Barycenter), r.Iterations)
}
