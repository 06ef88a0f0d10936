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
	p, err := setup([]*grid.Field{a, b}, Settings{Epsilon: s.Epsilon, Tol: s.Tol, MaxIter: s.MaxIter, Relax: s.Relax, Workers: s.Workers, Plain: true})
	if err != nil {
		return nil, err
	}
	return logSinkhorn(p.a[0], p.a[1], p, 0)
}

// logSinkhorn is the two-marginal Sinkhorn iteration in the log domain with
// epsilon-scaling, balanced (rho = 0) or with KL-relaxed marginals of
// strength rho. With lambda = rho / (rho + eps) (1 when balanced) and F, G
// the log-scalings,
//
//	F = log a - lambda LSE(G - C/eps),  G = log b - lambda LSE(F - C/eps).
//
// Balanced, the reference is the counting measure and the cost is
// OT = eps (<a, F> + <b, G>). Unbalanced, the reference is a (x) b
// (Sejourne, Feydy, Vialard, Trouve, Peyre 2019) and the dual value is
//
//	OT = rho <a, 1 - (K v)^(1-lambda)> + rho <b, 1 - (K u)^(1-lambda)> - eps (m(P) - m(a) m(b)).
//
// The stopping measure is the violation of u K v = a (K v)^(1-lambda),
// divided by 1 - lambda when unbalanced for the slow mass mode (as in
// Barycenter).
func logSinkhorn(a, b []float64, p *problem, rho float64) (*TransportResult, error) {
	start := time.Now()
	la, lb := logOf(a), logOf(b)
	n := p.n
	F, G := make([]float64, n), make([]float64, n)
	if rho > 0 {
		copy(F, la)
		copy(G, lb)
	}
	LKv, LKu, tmp := make([]float64, n), make([]float64, n), make([]float64, n)
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
		lam := 1.0
		if rho > 0 {
			lam = rho / (rho + eps)
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
			logUpdate(F, la, LKv, lam, rl.omega)
			k.Apply(LKu, F, tmp)
			logUpdate(G, lb, LKu, lam, rl.omega)
			k.Apply(LKv, G, tmp)
			var r float64
			for i := range F {
				if la[i] == ninf {
					continue
				}
				target := a[i]
				if lam != 1 {
					target = math.Exp(la[i] + (1-lam)*LKv[i])
				}
				r += math.Abs(math.Exp(F[i]+LKv[i]) - target)
			}
			if lam != 1 {
				r /= 1 - lam
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
			res.Cost = dualValue(a, b, F, G, LKv, LKu, eps, rho, lam)
			break
		}
		if total >= p.maxIter {
			break
		}
		// The potentials eps F, eps G carry over to the next epsilon.
		for i := range F {
			F[i] *= 2
			G[i] *= 2
		}
		eps /= 2
	}
	res.Elapsed = time.Since(start)
	return res, nil
}

// dualValue is the transport cost at converged log-scalings (see logSinkhorn).
func dualValue(a, b, F, G, LKv, LKu []float64, eps, rho, lam float64) float64 {
	if rho == 0 {
		var c float64
		for i := range F {
			if a[i] > 0 {
				c += a[i] * F[i]
			}
			if b[i] > 0 {
				c += b[i] * G[i]
			}
		}
		return eps * c
	}
	var ma, mb, mp, sa, sb float64
	for i := range F {
		ma += a[i]
		mb += b[i]
		if a[i] > 0 {
			mp += math.Exp(F[i] + LKv[i])
			sa += a[i] * (1 - math.Exp((1-lam)*LKv[i]))
		}
		if b[i] > 0 {
			sb += b[i] * (1 - math.Exp((1-lam)*LKu[i]))
		}
	}
	return rho*sa + rho*sb - eps*(mp-ma*mb)
}

// logUpdate sets X = log m - lambda L (the log of m (K y)^-lambda),
// over-relaxed by omega in the log domain, where that is a linear blend;
// -Inf marks zero mass.
func logUpdate(X, logm, L []float64, lambda, omega float64) {
	ninf := math.Inf(-1)
	for i := range X {
		t := logm[i] - lambda*L[i]
		if logm[i] == ninf {
			t = ninf
		} else if omega != 1 && X[i] != ninf {
			t = (1-omega)*X[i] + omega*t
		}
		X[i] = t
	}
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

// UnbalancedDivergence returns the unbalanced Sinkhorn divergence with KL
// penalty rho (Sejourne et al. 2019):
// S = OT(a, b) - OT(a, a)/2 - OT(b, b)/2 + eps/2 (m(a) - m(b))^2,
// zero for a = b, symmetric, and tending to the balanced divergence for
// equal masses as rho grows. Masses are measured relative to a's, so the
// value does not depend on the intensity unit.
func UnbalancedDivergence(a, b *grid.Field, rho float64, s Settings) (float64, []*TransportResult, error) {
	if !(rho > 0) {
		return 0, nil, fmt.Errorf("%w: unbalanced penalty must be positive, got %g", ErrInput, rho)
	}
	p, err := setup([]*grid.Field{a, b}, Settings{Epsilon: s.Epsilon, Tol: s.Tol, MaxIter: s.MaxIter, Workers: s.Workers, Plain: true})
	if err != nil {
		return 0, nil, err
	}
	ma, mb := p.masses[0], p.masses[1]
	A := p.a[0]
	B := make([]float64, p.n)
	for i, x := range p.a[1] {
		B[i] = x * mb / ma
	}
	pairs := [][2][]float64{{A, B}, {A, A}, {B, B}}
	out := make([]*TransportResult, 3)
	errs := make([]error, 3)
	grid.Parallel(3, s.Workers, func(i int) {
		out[i], errs[i] = logSinkhorn(pairs[i][0], pairs[i][1], p, rho)
	})
	for _, e := range errs {
		if e != nil {
			return 0, out, e
		}
	}
	dm := 1 - mb/ma
	return out[0].Cost - out[1].Cost/2 - out[2].Cost/2 + p.eps/2*dm*dm, out, nil
}
