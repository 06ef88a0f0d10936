package csvgrid_test

import (
	"bytes"
	"fmt"

	"barygrid/grid"
	"barygrid/io/csvgrid"
)

// Write a field and read it back exactly.
func ExampleRead() {
	f := grid.New(2, 3)
	f.Data = []float64{0, 0.5, 1, 1.5, 2, 2.5}
	var buf bytes.Buffer
	if err := csvgrid.Write(&buf, f); err != nil {
		panic(err)
	}
	g, err := csvgrid.Read(buf.Bytes(), csvgrid.ReadSettings{})
	if err != nil {
		panic(err)
	}
	fmt.Println(g.Rows, g.Cols, g.Data)
	// Output:
	// 2 3 [0 0.5 1 1.5 2 2.5]
}
