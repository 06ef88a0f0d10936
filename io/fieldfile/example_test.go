package fieldfile_test

import (
	"fmt"
	"os"
	"path/filepath"

	"barygrid/grid"
	"barygrid/io/fieldfile"
)

// Save by extension, load with a pixel size and unit; an existing file is
// kept unless replacing it is asked for.
func ExampleLoad() {
	dir, _ := os.MkdirTemp("", "fieldfile")
	defer os.RemoveAll(dir)
	p := filepath.Join(dir, "cell.npy")
	f := grid.New(2, 2)
	f.Data = []float64{1, 2, 3, 4}
	fieldfile.Save(p, f, fieldfile.SaveSettings{})
	_, err := fieldfile.Save(p, f, fieldfile.SaveSettings{})
	fmt.Println(err != nil)
	g, _ := fieldfile.Load(p, fieldfile.LoadSettings{Dx: 0.5, Unit: "um"})
	fmt.Println(g.Data, g.Dx, g.Unit)
	// Output:
	// true
	// [1 2 3 4] 0.5 um
}
