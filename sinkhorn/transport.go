package sinkhorn

import (
	"fmt"
	"math"
	"time"

	"barygrid/grid"
)

// TransportResult is the entropic optimal transport between two fields.
type TransportResult struct {
	// Cost is OT_eps(a, b) = <a, f> + <b, g> with the converged dual
	// potentials f, g (squared physical units); for unit-mass plans this is
	// the primal value <C, P> + eps KL(P | counting) up to a constant that
	// cancels in the Sinkhorn divergence.
	Cost       float64
	Iterations int
	Residual   float64
	Status     Status
	Elapsed    time.Duration
}

// Transport solves the entropic OT problem between a and b (normalised to
// unit mass) with Sinkhorn's iteration in the log domain (Cuturi 2013;
// log-domain form as in Schmitzer 2019), with epsilon-scaling and the same
// over-relaxation as Barycenter. Only Epsilon, Tol, MaxIter, Relax and
// Workers of s are used.
func Transport(a, b *grid.Field, s Settings) (*TransportResult, error) {
	start := time.Now()
	p, err := setup([]*grid.Field{a, b}, Settings{Epsilon: s.Epsilon, Tol: s.Tol, MaxIter: s.MaxIter, Relax: s.Relax, Workers: s.Workers, Plain: true})
	if err != nil {
		return nil, err
	}
	la, lb := logOf(p.a[0]), logOf(p.a[1])
	n := p.n
	F, G := make([]float64, n), make([]float64, n)
	LKv, LKu, tmp, tmp2 := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	ninf := math.Inf(-1)
	ext := math.Max(float64(p.cols)*p.dx, float64(p.rows)*p.dy)
	eps := math.Max(p.eps, ext*ext/10)
	res := &TransportResult{Status: IterationLimit}
	total := 0
	for {
		final := eps <= p.eps
		if final {
			eps = p.eps
		}
		k := NewLogKernel(p.rows, p.cols, p.dx, p.dy, eps)
		tol := p.tol
		cap := p.maxIter - total
		if !final {
			tol, cap = math.Max(p.tol, 1e-3), min(cap, 300)
		}
		rl := newRelaxation(p.relax)
		var hist []float64
		k.Apply(LKv, G, tmp)
		for it := 0; it < cap; it++ {
			// F = log a - LSE(G - C/eps), G = log b - LSE(F - C/eps).
			for i := range F {
				t := la[i] - LKv[i]
				if la[i] == ninf {
					t = ninf
				} else if rl.omega != 1 && F[i] != ninf {
					t = (1-rl.omega)*F[i] + rl.omega*t
				}
				F[i] = t
			}
			k.Apply(LKu, F, tmp)
			for i := range G {
				t := lb[i] - LKu[i]
				if lb[i] == ninf {
					t = ninf
				} else if rl.omega != 1 && G[i] != ninf {
					t = (1-rl.omega)*G[i] + rl.omega*t
				}
				G[i] = t
			}
			k.Apply(LKv, G, tmp2)
			var r float64
			for i, x := range p.a[0] {
				m := 0.0
				if F[i] != ninf {
					m = math.Exp(F[i] + LKv[i])
				}
				r += math.Abs(m - x)
			}
			total++
			hist = append(hist, r)
			if math.IsNaN(r) {
				res.Status = NumericalFailure
				return res, fmt.Errorf("sinkhorn: transport residual became NaN at epsilon %g", eps)
			}
			if r <= tol {
				break
			}
			rl.update(hist)
		}
		res.Iterations, res.Residual = total, hist[len(hist)-1]
		if final {
			if res.Residual <= p.tol {
				res.Status = Converged
			}
			var c float64
			for i := range F {
				if p.a[0][i] > 0 {
					c += p.a[0][i] * F[i]
				}
				if p.a[1][i] > 0 {
					c += p.a[1][i] * G[i]
				}
			}
			res.Cost = eps * c
			break
		}
		if total >= p.maxIter {
			break
		}
		// Potentials f = eps F carry over to the next epsilon.
		next := eps / 2
		for i := range F {
			F[i] *= eps / next
			G[i] *= eps / next
		}
		eps = next
	}
	res.Elapsed = time.Since(start)
	return res, nil
}

func logOf(a []float64) []float64 {
	out := make([]float64, len(a))
	for i, x := range a {
		out[i] = math.Log(x)
	}
	return out
}

// Divergence returns the Sinkhorn divergence
// S(a, b) = OT_eps(a, b) - OT_eps(a, a)/2 - OT_eps(b, b)/2
// (Genevay, Peyre, Cuturi 2018; Feydy et al., AISTATS 2019): zero for
// a = b, symmetric, non-negative, and equal to |tau|^2 for a translate by
// tau away from the borders. The three problems are solved in parallel.
func Divergence(a, b *grid.Field, s Settings) (float64, []*TransportResult, error) {
	pairs := [][2]*grid.Field{{a, b}, {a, a}, {b, b}}
	out := make([]*TransportResult, 3)
	errs := make([]error, 3)
	inner := s
	inner.Workers = 1
	grid.Parallel(3, s.Workers, func(i int) {
		out[i], errs[i] = Transport(pairs[i][0], pairs[i][1], inner)
	})
	for _, e := range errs {
		if e != nil {
			return 0, out, e
		}
	}
	return out[0].Cost - out[1].Cost/2 - out[2].Cost/2, out, nil
}
