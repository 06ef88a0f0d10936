package gaussfit

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

func randomFits(n int, seed uint64) []Gaussian {
	rng := rand.New(rand.NewPCG(seed, 99))
	gs := make([]Gaussian, n)
	for i := range gs {
		// Random 2 x 2 SPD: rotation of random variances.
		th := rng.Float64() * math.Pi
		a, b := 1+3*rng.Float64(), 0.5+2*rng.Float64()
		c, s := math.Cos(th), math.Sin(th)
		gs[i] = Gaussian{Mean: []float64{rng.NormFloat64(), 3 + rng.NormFloat64()},
			Cov: mat.NewSymDense(2, []float64{a*c*c + b*s*s, (a - b) * c * s, (a - b) * c * s, a*s*s + b*c*c})}
	}
	return gs
}

// The streamed estimate converges to the fixed point (the W2 barycenter of
// the same fits): its error after one pass over n fits falls roughly as
// 1/n, the rate of stochastic gradient descent for this strongly geodesically
// convex problem (Chewi, Maunu, Rigollet, Stromme 2020). The exponent of the
// mean squared error against n, fitted over seeds, lies near -1.
func TestStreamRate(t *testing.T) {
	const seeds = 24
	ns := []int{250, 1000, 4000, 16000}
	var xs, ys []float64
	for _, n := range ns {
		var mse float64
		for seed := uint64(1); seed <= seeds; seed++ {
			gs := randomFits(n, seed)
			fp, err := Barycenter(gs, Settings{})
			if err != nil {
				t.Fatal(err)
			}
			r, err := Stream(func() (Source, error) { return SliceSource(gs, nil), nil }, StreamSettings{})
			if err != nil {
				t.Fatal(err)
			}
			mse += W2Sq(r.Barycenter, fp.Barycenter) / seeds
		}
		xs, ys = append(xs, math.Log(float64(n))), append(ys, math.Log(mse))
		t.Logf("n %5d: mean W2^2 to the fixed point %.3g", n, mse)
	}
	var mx, my, sxy, sxx float64
	for i := range xs {
		mx += xs[i] / float64(len(xs))
		my += ys[i] / float64(len(ys))
	}
	for i := range xs {
		sxy += (xs[i] - mx) * (ys[i] - my)
		sxx += (xs[i] - mx) * (xs[i] - mx)
	}
	slope := sxy / sxx
	t.Logf("fitted exponent %.2f", slope)
	if slope > -0.7 || slope < -1.3 {
		t.Errorf("error falls as n^%.2f, want about n^-1", slope)
	}
}

// More passes bring the streamed estimate closer to the fixed point, the
// mean is exact, and the objective estimate is close to the fixed point's.
func TestStreamPasses(t *testing.T) {
	gs := randomFits(2000, 7)
	fp, _ := Barycenter(gs, Settings{})
	open := func() (Source, error) { return SliceSource(gs, nil), nil }
	one, _ := Stream(open, StreamSettings{})
	three, _ := Stream(open, StreamSettings{Passes: 3})
	e1, e3 := W2Sq(one.Barycenter, fp.Barycenter), W2Sq(three.Barycenter, fp.Barycenter)
	if e3 >= e1 {
		t.Errorf("3 passes: W2^2 %g, 1 pass %g", e3, e1)
	}
	for i := range fp.Barycenter.Mean {
		if math.Abs(three.Barycenter.Mean[i]-fp.Barycenter.Mean[i]) > 1e-9 {
			t.Errorf("mean %v, want %v", three.Barycenter.Mean, fp.Barycenter.Mean)
		}
	}
	want := fp.Objective[len(fp.Objective)-1]
	var dm float64
	for _, g := range gs {
		for i := range g.Mean {
			dm += (g.Mean[i] - fp.Barycenter.Mean[i]) * (g.Mean[i] - fp.Barycenter.Mean[i]) / float64(len(gs))
		}
	}
	want += dm
	if math.Abs(three.Objective-want) > 0.02*want {
		t.Errorf("objective estimate %g, fixed point's %g", three.Objective, want)
	}
}
