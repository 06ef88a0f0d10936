package grid_test

import (
	"fmt"

	"barygrid/grid"
)

// Moments are in physical units: with 0.5 um pixels a point at column 4,
// row 2 sits at (2, 1) um.
func ExampleComputeMoments() {
	f := grid.New(5, 8)
	f.Dx, f.Dy, f.Unit = 0.5, 0.5, "um"
	f.Set(2, 4, 3)
	m := grid.ComputeMoments(f)
	fmt.Println(m.Mass, m.Mean)
	// Output: 3 [2 1]
}
