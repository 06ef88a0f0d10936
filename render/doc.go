// Package render draws what barygrid leaves for people to look at: fields
// through its own colour map (Lagoon), the one-sigma ellipses of fitted
// Gaussians over a field, contact sheets of labelled thumbnails, the
// convergence plot of a solve (gonum.org/v1/plot) and the animation of a
// morph. It sits above the file packages: they store numbers, render turns
// them into pictures, and io/fieldfile.SaveImage writes those.
package render
