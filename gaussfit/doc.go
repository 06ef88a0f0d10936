// Package gaussfit is barygrid's Gaussian fast path: it fits each field's
// mass-weighted mean and covariance and averages the Gaussians in the
// Bures-Wasserstein geometry, where W2 has a closed form (Dowson & Landau
// 1982; Olkin & Pukelsheim 1982; Givens & Shortt 1984).
//
// The barycenter covariance S solves S = sum_k w_k (S^{1/2} S_k S^{1/2})^{1/2}
// (Knott & Smith 1994; Ruschendorf & Uckelmann 2002). Three solvers reach it:
// the fixed-point iteration (Alvarez-Esteban, del Barrio, Cuesta-Albertos,
// Matran 2016), Riemannian gradient descent with a step size, and
// stochastic gradient descent over single inputs or minibatches (Chewi,
// Maunu, Rigollet, Stromme 2020). All work in any dimension d.
package gaussfit
