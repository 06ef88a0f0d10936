// Package report defines the JSON reports barygrid writes beside its
// results (their key names are an interface other tools read) and builds
// them from solver results, so that a Go program writes the same reports as
// the command line.
//
// Keys are snake_case. Values are the resolved ones (the epsilon and
// tolerance actually used, weights normalised to sum 1); where a raw
// setting matters it carries a name that says so (epsilon_given).
package report
