// Package pose brings fields into one pose before averaging, as iterative
// template building does: cells that lie at any angle are turned so that
// their principal axes agree, the ambiguous half-turn (and, when allowed, a
// reflection) is chosen by the Sinkhorn divergence to the current template,
// for a few rounds, and the template is returned in the mean pose of the
// inputs.
//
// Resampling splats each pixel's mass bilinearly onto the four pixels
// around its new position, which conserves mass exactly (except for mass
// carried off the grid, reported).
//
// Angles are counter-clockwise as the field is displayed (rows pointing
// down), in degrees.
package pose
