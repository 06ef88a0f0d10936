package sinkhorn

import (
	"barygrid/internal/parallel"
	"fmt"
	"math"
	"slices"
	"time"

	"barygrid/grid"
)

// TransportResult is the entropic optimal transport between two fields.
type TransportResult struct {
	// Cost is OT_eps(a, b) = <a, f> + <b, g> with the converged dual
	// potentials f, g (squared physical units); for unit-mass plans this is
	// the primal value <C, P> + eps KL(P | counting) up to a constant that
	// cancels in the Sinkhorn divergence.
	Cost float64
	// Epsilon and Tol are the values used (defaults filled in).
	Epsilon, Tol     float64
	Iterations       int
	FinestIterations int
	Residual         float64
	Status           Status
	Message          string
	Method           Method
	Stages           []Stage
	Elapsed          time.Duration
	// Warm holds the final potentials, to warm-start a transport between
	// similar fields (Settings.Warm).
	Warm *WarmStart
}

// Transport solves the entropic OT problem between a and b (normalised to
// unit mass) with Sinkhorn's iteration (Cuturi 2013) on the same driver as
// Barycenter: coarse to fine, epsilon-scaling, the scaling representation
// where it is exact and the log domain elsewhere. Only Epsilon, Tol,
// MaxIter, Relax, Method, SingleScale, Workers and Warm of s are used; a
// warm start (the Warm of an earlier transport on the same grid and
// epsilon) runs only the last stage, from the earlier potentials. That pays
// where the fields moved little (a pose search turning an input by a degree:
// pose on 8 x 128^2 went from 14.5 to 12.6 s) and not where they moved
// more (a shift of half a pixel at 48^2: 129 iterations either way).
func Transport(a, b *grid.Field, s Settings) (*TransportResult, error) {
	p, err := setup([]*grid.Field{a, b}, Settings{Epsilon: s.Epsilon, Tol: s.Tol, MaxIter: s.MaxIter, Relax: s.Relax,
		Workers: s.Workers, Method: s.Method, SingleScale: s.SingleScale})
	if err != nil {
		return nil, err
	}
	p.warm = s.Warm
	return transport(p, p.a[0], p.a[1], 0)
}

// transport solves the two-marginal problem between a and b, balanced
// (rho = 0) or with KL-relaxed marginals of strength rho, on a copy of p's
// grid and settings. With lambda = rho / (rho + eps) (1 when balanced) and F,
// G the log-scalings,
//
//	F = log a - lambda LSE(G - C/eps),  G = log b - lambda LSE(F - C/eps).
//
// Balanced, the reference is the counting measure and the cost is
// OT = eps (<a, F> + <b, G>). Unbalanced, the reference is a (x) b
// (Sejourne, Feydy, Vialard, Trouve, Peyre 2019) and the dual value is
//
//	OT = rho <a, 1 - (K v)^(1-lambda)> + rho <b, 1 - (K u)^(1-lambda)> - eps (m(P) - m(a) m(b)).
func transport(base *problem, a, b []float64, rho float64) (*TransportResult, error) {
	start := time.Now()
	p := &problem{rows: base.rows, cols: base.cols, n: base.n, dx: base.dx, dy: base.dy, eps: base.eps,
		tol: base.tol, maxIter: base.maxIter, workers: 1, method: base.method, singleScale: base.singleScale,
		relax: base.relax, a: [][]float64{a}, target: b, w: []float64{1}, lambda: 1, warm: base.warm}
	if rho > 0 {
		p.rho, p.lambda, p.product = rho, rho/(rho+p.eps), true
	} else {
		p.symmetric = slices.Equal(a, b)
	}
	if err := p.checkLimits(); err != nil {
		return nil, err
	}
	r, last := p.solve()
	res := &TransportResult{Epsilon: p.eps, Tol: p.tol, Iterations: r.Iterations, FinestIterations: r.FinestIterations, Residual: r.Residual,
		Status: r.Status, Message: r.Message, Method: r.Method, Stages: r.Stages, Warm: r.Warm}
	if r.Status == NumericalFailure {
		return res, fmt.Errorf("sinkhorn: transport failed: %s", r.Message)
	}
	F, G, LKv, LKu := last.duals()
	res.Cost = dualValue(a, b, F, G, LKv, LKu, p.eps, rho, p.lambda)
	res.Elapsed = time.Since(start)
	return res, nil
}

// dualValue is the transport cost at converged log-scalings (see transport).
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
	inner.Workers, inner.Warm = 1, nil // three different problems
	parallel.For(3, s.Workers, func(i int) {
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
	p, err := setup([]*grid.Field{a, b}, Settings{Epsilon: s.Epsilon, Tol: s.Tol, MaxIter: s.MaxIter, Workers: s.Workers,
		Relax: s.Relax, Method: s.Method, SingleScale: s.SingleScale})
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
	parallel.For(3, s.Workers, func(i int) {
		out[i], errs[i] = transport(p, pairs[i][0], pairs[i][1], rho)
	})
	for _, e := range errs {
		if e != nil {
			return 0, out, e
		}
	}
	dm := 1 - mb/ma
	return out[0].Cost - out[1].Cost/2 - out[2].Cost/2 + p.eps/2*dm*dm, out, nil
}
