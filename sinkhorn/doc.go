// Package sinkhorn computes entropic optimal-transport barycenters of fields
// on a regular grid by iterative Bregman projections (Benamou, Carlier,
// Cuturi, Nenna, Peyre, SIAM J. Sci. Comput. 37(2), 2015), with the Gibbs
// kernel of the squared Euclidean cost applied separably along rows and
// columns (Solomon et al., ACM TOG 34(4), 2015), in physical units, and the
// entropic transport and Sinkhorn divergence between two fields.
//
// By default the barycenter is the plain entropic one at a small epsilon
// (one squared pixel, less on grids under 24 pixels a side): strictly convex, so it has one answer that the
// iteration reaches linearly, and blurred by less than a pixel. The
// debiased barycenter (Janati, Cuturi, Gramfort, ICML 2020) is an option;
// see Settings.Debias for where its fixed point is not smooth.
//
// One driver runs every problem: a pyramid of 2 x 2 block sums, epsilon
// halved stage by stage from a large value to the target, each stage on the
// coarsest level that resolves it, the potentials carried up by cubic
// interpolation (Schmitzer, SIAM J. Sci. Comput. 41(3), 2019; Feydy 2020).
// Each stage runs in one of two representations: scalings with a banded
// kernel (multiply-add only, the cheapest, exact while the scalings fit in
// float64), or potentials with a log-sum-exp kernel whose terms are found
// from a lower envelope and truncated where they cannot matter (exact
// whatever the range). MethodAuto picks the first where it is predicted
// exact and falls back to the second when it sees it fail.
//
// Unbalanced (Settings.Unbalanced = rho > 0): the inputs keep their masses
// and each plan P_k pays rho KL(P_k 1 | a_k) + rho KL(P_k^T 1 | b) instead
// of meeting its marginals (Chizat, Peyre, Schmitzer, Vialard 2018), with
// entropic reference the kernel divided by its total mass. The shape is
// that problem's solution; the mass reported and given to the field is
// the unregularised rule for that shape, M = (sum_k w_k sqrt(m_k)
// exp(-C_k / (2 rho)))^2 with C_k the Sinkhorn divergence from input k to
// the barycenter, because the entropic solution's own mass falls with
// epsilon (Result.EntropicMass keeps it).
//
// Conventions: pixel (r, c) sits at x = c*dx, y = r*dy; epsilon is in the
// cost's squared units; inputs are normalised to unit mass; the stopping
// measure is the largest first-marginal violation max_k |u_k * K v_k - a_k|_1.
package sinkhorn
