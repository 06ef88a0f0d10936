package imagefile_test

import (
	"bytes"
	"fmt"

	"barygrid/grid"
	"barygrid/io/imagefile"
)

// A 16-bit PNG keeps integer values as they are, and the scaling says so.
func ExampleWritePNG() {
	f := grid.New(1, 3)
	f.Data = []float64{0, 1000, 65535}
	var buf bytes.Buffer
	sc, err := imagefile.WritePNG(&buf, f, imagefile.WriteSettings{})
	if err != nil {
		panic(err)
	}
	g, _ := imagefile.Read(buf.Bytes(), imagefile.ReadSettings{})
	fmt.Println(sc)
	fmt.Println(g.Data)
	// Output:
	// linear, 0 -> 0 and 65535 -> 65535
	// [0 1000 65535]
}
