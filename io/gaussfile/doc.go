// Package gaussfile reads Gaussians written elsewhere: a JSON file holding
// {"gaussians": [{"mean": [...], "covariance": [[...]], "weight": w}, ...]},
// and JSON lines, one {"mean": [...], "cov": [[...]], "weight": w} object
// per line (weight optional), read as a stream in constant memory.
package gaussfile
