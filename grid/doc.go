// Package grid holds the field type shared by every part of barygrid: a 2-D
// array of non-negative intensities on a regular grid with a physical pixel
// size, read as a discrete measure.
//
// Conventions (shared with package sinkhorn and gaussfit): pixel (r, c) sits
// at x = c*Dx, y = r*Dy; moments are mass-weighted and in physical units;
// covariance matrices are ordered [[xx, xy], [xy, yy]].
//
// Functions take a field and return a new one; none modifies its argument.
package grid
