// Package sinkhorn computes entropic optimal-transport barycenters of fields
// on a regular grid by iterative Bregman projections (Benamou, Carlier,
// Cuturi, Nenna, Peyre, SIAM J. Sci. Comput. 37(2), 2015), with the Gibbs
// kernel of the squared Euclidean cost applied separably along rows and
// columns (Solomon et al., ACM TOG 34(4), 2015), in physical units.
//
// By default the barycenter is debiased (Janati, Cuturi, Gramfort, ICML
// 2020): the plain entropic barycenter is blurred, its covariance inflated by
// about epsilon/2 per axis, and debiasing removes that blur.
//
// Two iterations share one set of equations (see Barycenter): the scaling
// iteration, fast, banded and multiply-add only, and a log-domain
// iteration with epsilon-scaling for small epsilon, where the scalings would
// under- or overflow. MethodAuto starts with the first and moves to the
// second when it sees the scalings leave the safe range.
//
// Conventions: pixel (r, c) sits at x = c*dx, y = r*dy; epsilon is in the
// cost's squared units; inputs are normalised to unit mass; the stopping
// measure is the largest first-marginal violation max_k |u_k * K v_k - a_k|_1.
package sinkhorn
