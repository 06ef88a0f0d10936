package gaussfit

import (
	"gonum.org/v1/gonum/mat"
	"io"
	"math"
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

// genSource yields n random 2-D fits without storing them.
type genSource struct {
	rng *rand.Rand
	n   int
}

func (g *genSource) Next() (Gaussian, float64, error) {
	if g.n == 0 {
		return Gaussian{}, 0, io.EOF
	}
	g.n--
	th := g.rng.Float64() * math.Pi
	a, b := 1+3*g.rng.Float64(), 0.5+2*g.rng.Float64()
	c, s := math.Cos(th), math.Sin(th)
	return Gaussian{Mean: []float64{g.rng.NormFloat64(), g.rng.NormFloat64()},
		Cov: mat.NewSymDense(2, []float64{a*c*c + b*s*s, (a - b) * c * s, (a - b) * c * s, a*s*s + b*c*c})}, 1, nil
}

// BenchmarkStream1e6 is one streamed pass over 10^6 two-dimensional fits
// (the solver alone; gauss --stream adds the JSON parsing: measured 6.5 s
// for the whole command on a 10^6-line file, 22 MB peak).
func BenchmarkStream1e6(b *testing.B) {
	for b.Loop() {
		open := func() (Source, error) { return &genSource{rng: rand.New(rand.NewPCG(1, 2)), n: 1000000}, nil }
		if _, err := Stream(open, StreamSettings{}); err != nil {
			b.Fatal(err)
		}
	}
}
