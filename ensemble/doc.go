// Package ensemble holds what users do with a set of fields besides
// averaging them: the pixel mean to compare a barycenter with, distances
// between fields and their matrix, the ranking of inputs by their distance
// to the barycenter with robust outlier flags, and the displacement
// interpolation (morph) between two fields.
//
// Every function takes fields and settings and returns values; none reads
// or writes files, prints, or knows about the command line.
package ensemble
