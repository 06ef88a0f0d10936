package gaussfile_test

import (
	"fmt"
	"strings"

	"barygrid/gaussfit"
	"barygrid/io/gaussfile"
)

// Stream fits from JSON lines into the Bures-Wasserstein barycenter, one
// fit in memory at a time.
func ExampleNewLineSource() {
	lines := `{"mean": [0, 0], "cov": [[4, 0], [0, 1]]}
{"mean": [2, 0], "cov": [[1, 0], [0, 4]]}`
	open := func() (gaussfit.Source, error) {
		return gaussfile.NewLineSource(strings.NewReader(lines), "fits"), nil
	}
	r, err := gaussfit.Stream(open, gaussfit.StreamSettings{})
	if err != nil {
		panic(err)
	}
	fmt.Printf("mean %.1f, fits %d\n", r.Barycenter.Mean, r.Fits)
	// Output:
	// mean [1.0 0.0], fits 2
}
