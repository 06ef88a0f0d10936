package gaussfit

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"gonum.org/v1/gonum/mat"
)

// Gaussian is a normal distribution N(Mean, Cov) with a weight for averaging.
type Gaussian struct {
	Mean []float64
	Cov  *mat.SymDense
}

// ErrMatrix reports a covariance that is not a symmetric positive-definite
// matrix of the right size.
var ErrMatrix = errors.New("gaussfit: bad covariance")

// ErrNumerical reports a solve that lost its numbers (a failed eigensolve
// or a non-finite iterate).
var ErrNumerical = errors.New("gaussfit: numerical failure")

// CheckCov verifies that c is d x d, symmetric and positive definite.
func CheckCov(c [][]float64, d int) (*mat.SymDense, error) {
	if len(c) != d {
		return nil, fmt.Errorf("%w: %d rows, want %d", ErrMatrix, len(c), d)
	}
	s := mat.NewSymDense(d, nil)
	for i := range c {
		if len(c[i]) != d {
			return nil, fmt.Errorf("%w: row %d has %d entries, want %d", ErrMatrix, i+1, len(c[i]), d)
		}
		for j := range c[i] {
			if math.IsNaN(c[i][j]) || math.IsInf(c[i][j], 0) {
				return nil, fmt.Errorf("%w: entry (%d, %d) is not finite", ErrMatrix, i+1, j+1)
			}
			if math.Abs(c[i][j]-c[j][i]) > 1e-9*(math.Abs(c[i][j])+math.Abs(c[j][i])+1e-300) {
				return nil, fmt.Errorf("%w: not symmetric at (%d, %d)", ErrMatrix, i+1, j+1)
			}
			s.SetSym(i, j, (c[i][j]+c[j][i])/2)
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(s) {
		return nil, fmt.Errorf("%w: not positive definite", ErrMatrix)
	}
	return s, nil
}

// sqrtm returns the symmetric square root (and, when inv, the inverse root)
// by eigendecomposition; eigenvalues below zero from rounding are clipped.
// If the eigensolver fails (non-finite input) every entry is NaN, which the
// callers' results then carry and Barycenter reports as an error.
func sqrtm(a mat.Symmetric, inv bool) *mat.SymDense {
	if a.SymmetricDim() == 2 {
		return sqrt2(a, inv)
	}
	var es mat.EigenSym
	if !es.Factorize(a, true) {
		n := a.SymmetricDim()
		out := mat.NewSymDense(n, nil)
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				out.SetSym(i, j, math.NaN())
			}
		}
		return out
	}
	vals := es.Values(nil)
	var vecs mat.Dense
	es.VectorsTo(&vecs)
	n := len(vals)
	out := mat.NewSymDense(n, nil)
	for k, l := range vals {
		l = math.Max(l, 0)
		s := math.Sqrt(l)
		if inv {
			if s == 0 {
				s = math.Inf(1)
			} else {
				s = 1 / s
			}
		}
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				out.SetSym(i, j, out.At(i, j)+s*vecs.At(i, k)*vecs.At(j, k))
			}
		}
	}
	return out
}

// sqrt2 is the closed form for 2 x 2 SPD matrices (Cayley-Hamilton):
// sqrt(A) = (A + s I) / t with s = sqrt(det A), t = sqrt(tr A + 2 s); it is
// the hot path of the fast path and ten times cheaper than an eigensolve.
func sqrt2(a mat.Symmetric, inv bool) *mat.SymDense {
	p, q, r := a.At(0, 0), a.At(0, 1), a.At(1, 1)
	det := math.Max(p*r-q*q, 0)
	s := math.Sqrt(det)
	t := math.Sqrt(math.Max(p+r+2*s, 0))
	if t == 0 {
		return mat.NewSymDense(2, []float64{0, 0, 0, 0})
	}
	x, y, z := (p+s)/t, q/t, (r+s)/t
	if inv {
		d := x*z - y*y
		if d <= 0 {
			inf := math.Inf(1)
			return mat.NewSymDense(2, []float64{inf, 0, 0, inf})
		}
		x, y, z = z/d, -y/d, x/d
	}
	return mat.NewSymDense(2, []float64{x, y, y, z})
}

func symmetrize(m mat.Matrix) *mat.SymDense {
	r, _ := m.Dims()
	s := mat.NewSymDense(r, nil)
	for i := 0; i < r; i++ {
		for j := i; j < r; j++ {
			s.SetSym(i, j, (m.At(i, j)+m.At(j, i))/2)
		}
	}
	return s
}

// Map returns the matrix T of the optimal map x -> m2 + T (x - m1) from
// N(m1, S1) to N(m2, S2): T = S1^{-1/2} (S1^{1/2} S2 S1^{1/2})^{1/2} S1^{-1/2}.
func OptimalMap(s1, s2 mat.Symmetric) *mat.SymDense {
	r := sqrtm(s1, false)
	ri := sqrtm(s1, true)
	var m, t mat.Dense
	m.Mul(r, s2)
	m.Mul(&m, r)
	mid := sqrtm(symmetrize(&m), false)
	t.Mul(ri, mid)
	t.Mul(&t, ri)
	return symmetrize(&t)
}

// BuresSq returns tr(S1 + S2 - 2 (S2^{1/2} S1 S2^{1/2})^{1/2}).
func BuresSq(s1, s2 mat.Symmetric) float64 {
	r := sqrtm(s2, false)
	var m mat.Dense
	m.Mul(r, s1)
	m.Mul(&m, r)
	mid := sqrtm(symmetrize(&m), false)
	return math.Max(0, mat.Trace(s1)+mat.Trace(s2)-2*mat.Trace(mid))
}

// W2Sq returns the squared 2-Wasserstein distance between two Gaussians,
// |m1 - m2|^2 + BuresSq(S1, S2) (Dowson & Landau 1982).
func W2Sq(a, b Gaussian) float64 {
	var d float64
	for i := range a.Mean {
		d += (a.Mean[i] - b.Mean[i]) * (a.Mean[i] - b.Mean[i])
	}
	return d + BuresSq(a.Cov, b.Cov)
}

// Geodesic returns the point at t in [0, 1] on the W2 geodesic from a to b
// (McCann interpolation): mean (1-t) m1 + t m2, covariance
// ((1-t) I + t T) S1 ((1-t) I + t T).
func Geodesic(a, b Gaussian, t float64) Gaussian {
	m := make([]float64, len(a.Mean))
	for i := range m {
		m[i] = (1-t)*a.Mean[i] + t*b.Mean[i]
	}
	return Gaussian{Mean: m, Cov: moveAlong(a.Cov, OptimalMap(a.Cov, b.Cov), t)}
}

// moveAlong returns M S M with M = (1 - t) I + t T: the covariance after a
// step t along the map T (a geodesic point for the map to one Gaussian, a
// gradient step for the mean of the maps to many).
func moveAlong(S mat.Symmetric, T mat.Matrix, t float64) *mat.SymDense {
	d := S.SymmetricDim()
	M := mat.NewDense(d, d, nil)
	for i := 0; i < d; i++ {
		for j := 0; j < d; j++ {
			v := t * T.At(i, j)
			if i == j {
				v += 1 - t
			}
			M.Set(i, j, v)
		}
	}
	var n mat.Dense
	n.Mul(M, S)
	n.Mul(&n, M)
	return symmetrize(&n)
}

// Solver selects the barycenter algorithm.
type Solver int

const (
	// FixedPoint: S <- S^{-1/2} (sum_k w_k (S^{1/2} S_k S^{1/2})^{1/2})^2 S^{-1/2}.
	FixedPoint Solver = iota
	// Gradient: Riemannian gradient descent, S <- M S M with
	// M = (1 - eta) I + eta sum_k w_k T_k.
	Gradient
	// Stochastic: stochastic gradient descent, passes over the inputs
	// drawn at random in proportion to their weights, a few per step, with
	// a decreasing step eta_t: for many fits, where one full gradient is
	// costly.
	Stochastic
)

func (s Solver) String() string {
	return [...]string{"fixed-point", "gradient-descent", "sampled"}[s]
}

// Settings of a barycenter computation; zero values mean the defaults.
type Settings struct {
	Solver Solver
	// Weights, non-negative; nil means equal.
	Weights []float64
	// Tol stops when the gradient norm |sum_k w_k T_k - I|_F falls below it;
	// zero means 1e-10. Not used by Stochastic, which runs its passes.
	Tol float64
	// MaxIter caps iterations of FixedPoint and Gradient; zero means 1000.
	MaxIter int
	// Passes is the number of passes over the inputs of Stochastic; zero
	// means 10.
	Passes int
	// Step is the gradient-descent step eta; zero means 1.
	Step float64
	// FitsPerStep is the number of inputs Stochastic draws per step; zero
	// means 1.
	FitsPerStep int
	// Seed makes stochastic runs reproducible.
	Seed uint64
	// Start is the initial covariance; nil means the weighted mean of the
	// inputs' covariances.
	Start *mat.SymDense
}

// Result of a barycenter computation.
type Result struct {
	Barycenter Gaussian
	Iterations int
	// Objective holds sum_k w_k W2^2(input_k, current) after each
	// iteration (every pass for Stochastic).
	Objective []float64
	// GradNorm is the final |sum_k w_k T_k - I|_F, zero at the barycenter.
	GradNorm  float64
	Converged bool
	Elapsed   time.Duration
}

// Barycenter returns the W2 barycenter of Gaussians.
func Barycenter(gs []Gaussian, s Settings) (*Result, error) {
	start := time.Now()
	if len(gs) == 0 {
		return nil, errors.New("gaussfit: no Gaussians")
	}
	d := len(gs[0].Mean)
	for i, g := range gs {
		if len(g.Mean) != d || g.Cov == nil || g.Cov.SymmetricDim() != d {
			return nil, fmt.Errorf("gaussfit: Gaussian %d is not of dimension %d", i+1, d)
		}
	}
	w := make([]float64, len(gs))
	var ws float64
	for i := range w {
		w[i] = 1
		if s.Weights != nil {
			if len(s.Weights) != len(gs) {
				return nil, fmt.Errorf("gaussfit: %d weights for %d Gaussians", len(s.Weights), len(gs))
			}
			w[i] = s.Weights[i]
			if !(w[i] >= 0) || math.IsInf(w[i], 0) {
				return nil, fmt.Errorf("gaussfit: weight %d is %g", i+1, w[i])
			}
		}
		ws += w[i]
	}
	if !(ws > 0) {
		return nil, errors.New("gaussfit: weights sum to zero")
	}
	for i := range w {
		w[i] /= ws
	}
	tol, maxIter, eta := s.Tol, s.MaxIter, s.Step
	if tol == 0 {
		tol = 1e-10
	}
	if eta == 0 {
		eta = 1
	}
	mean := make([]float64, d)
	for k, g := range gs {
		for i := range mean {
			mean[i] += w[k] * g.Mean[i]
		}
	}
	S := mat.NewSymDense(d, nil)
	if s.Start != nil {
		S.CopySym(s.Start)
	} else {
		for k, g := range gs {
			S.AddSym(S, scaled(g.Cov, w[k]))
		}
	}
	res := &Result{}
	objective := func(S *mat.SymDense) float64 {
		var o float64
		for k, g := range gs {
			o += w[k] * BuresSq(g.Cov, S)
		}
		return o
	}
	grad := func(S *mat.SymDense, idx []int, wt []float64) *mat.Dense {
		G := mat.NewDense(d, d, nil)
		for n, k := range idx {
			T := OptimalMap(S, gs[k].Cov)
			var t mat.Dense
			t.Scale(wt[n], T)
			G.Add(G, &t)
		}
		return G
	}
	all := make([]int, len(gs))
	for i := range all {
		all[i] = i
	}
	gnorm := func(S *mat.SymDense) float64 { return normMinusI(grad(S, all, w), d) }
	step := moveAlong
	switch s.Solver {
	case FixedPoint, Gradient:
		if maxIter == 0 {
			maxIter = 1000
		}
		if s.Solver == FixedPoint {
			eta = 1 // the fixed-point iteration is the unit-step gradient step
		}
		// The map average at S is both the step's direction and the
		// convergence measure, so each iteration computes it once.
		G := grad(S, all, w)
		for it := 1; it <= maxIter; it++ {
			S = step(S, G, eta)
			res.Iterations = it
			res.Objective = append(res.Objective, objective(S))
			G = grad(S, all, w)
			if g := normMinusI(G, d); g <= tol {
				res.Converged, res.GradNorm = true, g
				break
			}
		}
	case Stochastic:
		passes := s.Passes
		if passes == 0 {
			passes = 10
		}
		batch := max(1, s.FitsPerStep)
		rng := rand.New(rand.NewPCG(s.Seed, 0x5eed))
		// Sampling inputs in proportion to their weights makes each step an
		// unbiased estimate of the full gradient; eta_t = 1/(t+1) per
		// sample is the running-mean analogue of the Euclidean case.
		cum := make([]float64, len(w))
		var c float64
		for i, x := range w {
			c += x
			cum[i] = c
		}
		t := 0
		steps := (len(gs) + batch - 1) / batch
		for p := 0; p < passes; p++ {
			for n := 0; n < steps; n++ {
				idx := make([]int, batch)
				wt := make([]float64, batch)
				for b := range idx {
					u := rng.Float64()
					k := 0
					for k < len(cum)-1 && cum[k] < u {
						k++
					}
					idx[b], wt[b] = k, 1/float64(batch)
				}
				eta := float64(batch) / float64(t+batch+1)
				if s.Step != 0 {
					eta = s.Step / math.Sqrt(float64(n+p*steps+1))
				}
				S = step(S, grad(S, idx, wt), eta)
				t += batch
				res.Iterations++
			}
			res.Objective = append(res.Objective, objective(S))
		}
		res.Converged = true
	default:
		return nil, fmt.Errorf("gaussfit: unknown solver %d", s.Solver)
	}
	if !res.Converged || s.Solver == Stochastic {
		res.GradNorm = gnorm(S)
	}
	for i := 0; i < d; i++ {
		for j := 0; j < d; j++ {
			if x := S.At(i, j); math.IsNaN(x) || math.IsInf(x, 0) {
				return nil, fmt.Errorf("%w: the covariance became non-finite (the eigensolver failed)", ErrNumerical)
			}
		}
	}
	res.Barycenter = Gaussian{Mean: mean, Cov: S}
	res.Elapsed = time.Since(start)
	return res, nil
}

// normMinusI returns |G - I|_F, G the weighted mean of the maps: zero
// exactly at the barycenter (the Riemannian gradient is G - I).
func normMinusI(G *mat.Dense, d int) float64 {
	var s float64
	for i := 0; i < d; i++ {
		for j := 0; j < d; j++ {
			v := G.At(i, j)
			if i == j {
				v--
			}
			s += v * v
		}
	}
	return math.Sqrt(s)
}

func scaled(s mat.Symmetric, f float64) *mat.SymDense {
	n := s.SymmetricDim()
	out := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			out.SetSym(i, j, f*s.At(i, j))
		}
	}
	return out
}
