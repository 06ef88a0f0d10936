package parallel_test

import (
	"fmt"

	"barygrid/internal/parallel"
)

// Results written to per-index slots do not depend on the number of
// workers.
func ExampleFor() {
	squares := make([]int, 5)
	parallel.For(len(squares), 3, func(i int) { squares[i] = i * i })
	fmt.Println(squares)
	// Output:
	// [0 1 4 9 16]
}
