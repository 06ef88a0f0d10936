package npy_test

import (
	"bytes"
	"fmt"

	"barygrid/grid"
	"barygrid/io/npy"
)

// Write a field and read it back exactly.
func ExampleRead() {
	f := grid.New(2, 3)
	f.Data = []float64{0, 0.5, 1, 1.5, 2, 2.5}
	var buf bytes.Buffer
	if err := npy.Write(&buf, f); err != nil {
		panic(err)
	}
	g, err := npy.Read(buf.Bytes(), npy.ReadSettings{})
	if err != nil {
		panic(err)
	}
	fmt.Println(g.Rows, g.Cols, g.Data)
	// Output:
	// 2 3 [0 0.5 1 1.5 2 2.5]
}
