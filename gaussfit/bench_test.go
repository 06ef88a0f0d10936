package gaussfit

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkGaussBarycenter10000 averages 10,000 2-D Gaussians by the fixed
// point (the target: well under a second for the whole process).
func BenchmarkGaussBarycenter10000(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	gs := make([]Gaussian, 10000)
	for i := range gs {
		gs[i] = Gaussian{Mean: []float64{rng.Float64(), rng.Float64()}, Cov: randSPD(rng, 2, 1+rng.Float64())}
	}
	for b.Loop() {
		if _, err := Barycenter(gs, Settings{}); err != nil {
			b.Fatal(err)
		}
	}
}
