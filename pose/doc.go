// Package pose brings fields into one pose before averaging, as iterative
// template building does: cells that lie at any angle are turned so that
// their principal axes agree, the ambiguous half-turn (and, when allowed, a
// reflection) is chosen by the Sinkhorn divergence to the current template,
// for a few rounds, and the template is returned in the mean pose of the
// inputs.
//
// Resampling takes each output pixel by bilinear interpolation at its
// pre-image (a rigid motion keeps areas) and scales the result to the mass
// that stays on the grid, so that mass is conserved exactly except for what
// is carried off the grid (reported).
//
// Angles are counter-clockwise as the field is displayed (rows pointing
// down), in degrees.
package pose
