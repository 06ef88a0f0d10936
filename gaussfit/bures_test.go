package gaussfit

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"barygrid/grid"

	"gonum.org/v1/gonum/mat"
)

func sym(a, b, c float64) *mat.SymDense { return mat.NewSymDense(2, []float64{a, b, b, c}) }

// W2 between Gaussians (Dowson & Landau 1982; Olkin & Pukelsheim 1982;
// Givens & Shortt 1984). Hand-computed cases: commuting diagonal
// covariances give sum (sqrt(a_i) - sqrt(b_i))^2; in 1-D,
// W2^2 = (m1 - m2)^2 + (s1 - s2)^2.
func TestW2ClosedForm(t *testing.T) {
	a := Gaussian{Mean: []float64{1, 2}, Cov: sym(4, 0, 9)}
	b := Gaussian{Mean: []float64{4, -2}, Cov: sym(1, 0, 16)}
	// |m|^2 = 9 + 16 = 25; (2-1)^2 + (3-4)^2 = 2
	if got := W2Sq(a, b); math.Abs(got-27) > 1e-12 {
		t.Errorf("W2^2 = %.15g, want 27", got)
	}
	// A rotated pair: S2 = R S1 R^T with R a rotation by 90 degrees,
	// S1 = diag(4, 1): S2 = diag(1, 4), and tr(S1 + S2 - 2 (S1^1/2 S2 S1^1/2)^1/2)
	// = 10 - 2 * (2 + 2) = 2 (diagonal, commuting).
	c := Gaussian{Mean: []float64{0, 0}, Cov: sym(4, 0, 1)}
	d := Gaussian{Mean: []float64{0, 0}, Cov: sym(1, 0, 4)}
	if got := W2Sq(c, d); math.Abs(got-2) > 1e-12 {
		t.Errorf("rotated W2^2 = %.15g, want 2", got)
	}
	// Non-commuting: S1 = I, S2 = [[2,1],[1,2]] (eigenvalues 3, 1):
	// tr = 2 + 4 - 2 (sqrt 3 + 1).
	e := Gaussian{Mean: []float64{0, 0}, Cov: sym(1, 0, 1)}
	f := Gaussian{Mean: []float64{0, 0}, Cov: sym(2, 1, 2)}
	if got, want := W2Sq(e, f), 6-2*(math.Sqrt(3)+1); math.Abs(got-want) > 1e-12 {
		t.Errorf("W2^2 = %.15g, want %.15g", got, want)
	}
}

func randSPD(rng *rand.Rand, d int, scale float64) *mat.SymDense {
	a := mat.NewDense(d, d, nil)
	for i := 0; i < d; i++ {
		for j := 0; j < d; j++ {
			a.Set(i, j, rng.NormFloat64())
		}
	}
	var s mat.SymDense
	s.SymOuterK(scale, a)
	for i := 0; i < d; i++ {
		s.SetSym(i, i, s.At(i, i)+0.5*scale)
	}
	return &s
}

// The barycenter satisfies S = sum_k w_k (S^{1/2} S_k S^{1/2})^{1/2}
// (Knott & Smith 1994; Ruschendorf & Uckelmann 2002) to 1e-12, for every
// solver that claims convergence, in dimension 2 and 4.
func TestFixedPointEquation(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, d := range []int{2, 4} {
		var gs []Gaussian
		for k := 0; k < 6; k++ {
			gs = append(gs, Gaussian{Mean: make([]float64, d), Cov: randSPD(rng, d, 1+float64(k))})
		}
		w := []float64{1, 2, 3, 1, 2, 1}
		for _, solver := range []Solver{FixedPoint, Gradient} {
			r, err := Barycenter(gs, Settings{Solver: solver, Weights: w, Tol: 1e-13})
			if err != nil || !r.Converged {
				t.Fatalf("d=%d %v: %v", d, solver, err)
			}
			S := r.Barycenter.Cov
			root := sqrtm(S, false)
			sum := mat.NewDense(d, d, nil)
			for k, g := range gs {
				var m mat.Dense
				m.Mul(root, g.Cov)
				m.Mul(&m, root)
				var s mat.Dense
				s.Scale(w[k]/10, sqrtm(symmetrize(&m), false))
				sum.Add(sum, &s)
			}
			var diff mat.Dense
			diff.Sub(sum, S)
			if n := mat.Norm(&diff, 2) / mat.Norm(S, 2); n > 1e-12 {
				t.Errorf("d=%d %v: fixed-point equation violated by %g", d, solver, n)
			}
		}
	}
}

// Closed forms: commuting covariances give S = (sum_k w_k S_k^{1/2})^2; in
// one dimension sigma = sum_k w_k sigma_k; two inputs with weights 1/2 give
// the geodesic midpoint (standard facts of the Bures-Wasserstein geometry).
func TestClosedForms(t *testing.T) {
	gs := []Gaussian{
		{Mean: []float64{0, 0}, Cov: sym(4, 0, 1)},
		{Mean: []float64{2, 2}, Cov: sym(9, 0, 16)},
		{Mean: []float64{1, 5}, Cov: sym(1, 0, 4)},
	}
	w := []float64{0.5, 0.3, 0.2}
	r, _ := Barycenter(gs, Settings{Weights: w})
	sx := 0.5*2 + 0.3*3 + 0.2*1
	sy := 0.5*1 + 0.3*4 + 0.2*2
	if c := r.Barycenter.Cov; math.Abs(c.At(0, 0)-sx*sx) > 1e-10 || math.Abs(c.At(1, 1)-sy*sy) > 1e-10 || math.Abs(c.At(0, 1)) > 1e-10 {
		t.Errorf("commuting barycenter %v, want diag(%g, %g)", mat.Formatted(c), sx*sx, sy*sy)
	}
	if m := r.Barycenter.Mean; math.Abs(m[0]-0.8) > 1e-12 || math.Abs(m[1]-1.6) > 1e-12 {
		t.Errorf("mean %v, want (0.8, 1.6)", m)
	}
	one := []Gaussian{{Mean: []float64{0}, Cov: mat.NewSymDense(1, []float64{4})}, {Mean: []float64{3}, Cov: mat.NewSymDense(1, []float64{25})}}
	r1, _ := Barycenter(one, Settings{Weights: []float64{0.25, 0.75}})
	if s := math.Sqrt(r1.Barycenter.Cov.At(0, 0)); math.Abs(s-(0.25*2+0.75*5)) > 1e-10 {
		t.Errorf("1-D sigma %g, want %g", s, 0.25*2+0.75*5)
	}
	a := Gaussian{Mean: []float64{0, 0}, Cov: sym(3, 1, 2)}
	b := Gaussian{Mean: []float64{4, 0}, Cov: sym(1, -0.5, 5)}
	mid := Geodesic(a, b, 0.5)
	r2, _ := Barycenter([]Gaussian{a, b}, Settings{Tol: 1e-14})
	var diff mat.Dense
	diff.Sub(mid.Cov, r2.Barycenter.Cov)
	if mat.Norm(&diff, 2) > 1e-10 {
		t.Errorf("midpoint %v != barycenter %v", mat.Formatted(mid.Cov), mat.Formatted(r2.Barycenter.Cov))
	}
}

// Gradient descent converges linearly on inputs whose covariances have
// operator norm <= 1 and determinant >= 2 zeta, at least as fast as
// (1 - zeta^2) per step in the objective gap (fact of the trade, no source).
func TestGradientLinearRate(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	var gs []Gaussian
	zeta := math.Inf(1)
	for k := 0; k < 8; k++ {
		th := rng.Float64() * math.Pi
		l1, l2 := 0.6+0.4*rng.Float64(), 0.6+0.4*rng.Float64()
		c, s := math.Cos(th), math.Sin(th)
		cov := sym(l1*c*c+l2*s*s, (l1-l2)*c*s, l1*s*s+l2*c*c)
		zeta = math.Min(zeta, l1*l2/2)
		gs = append(gs, Gaussian{Mean: []float64{0, 0}, Cov: cov})
	}
	ref, _ := Barycenter(gs, Settings{Tol: 1e-14})
	opt := ref.Objective[len(ref.Objective)-1]
	r, _ := Barycenter(gs, Settings{Solver: Gradient, Step: 1, MaxIter: 6, Tol: 1e-300, Start: sym(0.1, 0, 0.1)})
	rate := 1 - zeta*zeta
	for i := 1; i < len(r.Objective); i++ {
		g0, g1 := r.Objective[i-1]-opt, r.Objective[i]-opt
		if g0 > 1e-13 && g1 > rate*g0+1e-14 {
			t.Errorf("step %d: gap %g -> %g, slower than (1 - zeta^2) = %g", i, g0, g1, rate)
		}
	}
}

// Stochastic gradient descent: after one pass over n samples its error
// decays like 1/n (the Gaussian-barycenter analogue of the running mean;
// Chewi et al. 2020). The mean squared W2 error over 40 seeds at n and 4n
// must shrink by a factor between 2 and 8 (4 expected; tolerance for the
// statistical noise of 40 repetitions).
func TestStochasticRate(t *testing.T) {
	// Population: covariances drawn around a fixed SPD matrix; the target is
	// the barycenter of the population, approximated by one of many draws.
	pop := func(rng *rand.Rand, n int) []Gaussian {
		var gs []Gaussian
		for i := 0; i < n; i++ {
			a := 1 + 0.5*rng.NormFloat64()*0.3
			b := 0.3 * rng.NormFloat64() * 0.3
			c := 2 + 0.5*rng.NormFloat64()*0.3
			gs = append(gs, Gaussian{Mean: []float64{0, 0}, Cov: sym(math.Abs(a)+0.2, b, math.Abs(c)+0.2)})
		}
		return gs
	}
	big := pop(rand.New(rand.NewPCG(1, 1)), 20000)
	truth, _ := Barycenter(big, Settings{})
	mse := func(n int) float64 {
		var s float64
		for seed := uint64(0); seed < 40; seed++ {
			gs := pop(rand.New(rand.NewPCG(100+seed, 7)), n)
			r, err := Barycenter(gs, Settings{Solver: Stochastic, Passes: 1, Seed: seed, Start: sym(1, 0, 1)})
			if err != nil {
				t.Fatal(err)
			}
			s += BuresSq(r.Barycenter.Cov, truth.Barycenter.Cov)
		}
		return s / 40
	}
	e1, e4 := mse(50), mse(200)
	t.Logf("MSE n=50: %.4g, n=200: %.4g, ratio %.2f", e1, e4, e1/e4)
	if ratio := e1 / e4; ratio < 2 || ratio > 8 {
		t.Errorf("MSE ratio for 4x the samples = %.2f, want about 4", ratio)
	}
}

// A sampled Gaussian field fits back to its parameters; the barycenter of
// fitted fields agrees with the barycenter of the true parameters.
func TestFitSampledGaussians(t *testing.T) {
	truths := []Gaussian{{Mean: []float64{20, 25}, Cov: sym(16, 4, 9)}, {Mean: []float64{40, 30}, Cov: sym(9, -2, 25)}}
	var fitted []Gaussian
	for _, g := range truths {
		f := Render(g, 64, 64, 1, 1, 1)
		h, mass, err := Fit(f, FitSettings{})
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(mass-1) > 1e-12 {
			t.Errorf("mass %g", mass)
		}
		fitted = append(fitted, h)
		if W2Sq(g, h) > 1e-8 {
			t.Errorf("fit %v %v far from truth (W2^2 %g)", h.Mean, mat.Formatted(h.Cov), W2Sq(g, h))
		}
	}
	a, _ := Barycenter(truths, Settings{})
	b, _ := Barycenter(fitted, Settings{})
	if d := W2Sq(a.Barycenter, b.Barycenter); d > 1e-8 {
		t.Errorf("barycenters differ by W2^2 %g", d)
	}
	_ = grid.New
}

func TestBadMatrices(t *testing.T) {
	for _, c := range [][][]float64{{{1, 2}, {0, 1}}, {{1, 2}, {2, 1}}, {{1, 0}}, {{1, 0, 0}, {0, 1, 0}}} {
		if _, err := CheckCov(c, 2); err == nil {
			t.Errorf("%v accepted", c)
		}
	}
}

// A covariance the eigensolver cannot take (a NaN entry, built around
// CheckCov) is an error from Barycenter, not a panic.
func TestBarycenterNumericalFailureIsAnError(t *testing.T) {
	bad := mat.NewSymDense(3, []float64{1, 0, 0, 0, math.NaN(), 0, 0, 0, 1})
	good := mat.NewSymDense(3, []float64{2, 0, 0, 0, 1, 0, 0, 0, 1})
	_, err := Barycenter([]Gaussian{{Mean: []float64{0, 0, 0}, Cov: bad}, {Mean: []float64{1, 0, 0}, Cov: good}}, Settings{})
	if !errors.Is(err, ErrNumerical) {
		t.Fatalf("got %v, want ErrNumerical", err)
	}
}
