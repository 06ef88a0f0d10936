// Package sheet draws the pictures a batch leaves for people to look at: a
// contact sheet of labelled thumbnails (inputs, pixel mean, barycenter,
// Gaussian ellipses) and a convergence plot of the residual against the
// iteration on a log scale (gonum.org/v1/plot).
package sheet
