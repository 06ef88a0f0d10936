package report_test

import (
	"fmt"

	"barygrid/grid"
	"barygrid/report"
	"barygrid/sinkhorn"
)

// Build the report a Go program writes beside its barycenter, with the
// values the solver actually used.
func ExampleNewBarycenter() {
	a, b := grid.New(24, 24), grid.New(24, 24)
	a.Set(2, 2, 1)
	b.Set(5, 6, 1)
	s := sinkhorn.Settings{}
	r, _ := sinkhorn.Barycenter([]*grid.Field{a, b}, s)
	rep := report.NewBarycenter([]string{"a.npy", "b.npy"}, []*grid.Field{a, b}, nil, s, r)
	fmt.Println(rep.Status, rep.Epsilon, rep.EpsilonGiven, rep.Tol)
	// Output:
	// converged 1 false 1e-06
}
