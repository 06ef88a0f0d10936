package render_test

import (
	"fmt"

	"barygrid/grid"
	"barygrid/io/imagefile"
	"barygrid/render"
)

// Colour a field on the scale 0 to its maximum: the returned scaling says
// which value each of the 256 levels stands for.
func ExampleColorize() {
	f := grid.New(2, 2)
	f.Data = []float64{0, 1, 2, 4}
	im, sc := render.Colorize(f, imagefile.WriteSettings{})
	fmt.Println(im.Bounds().Dx(), im.Bounds().Dy())
	fmt.Println(sc)
	// Output:
	// 2 2
	// linear, 0 -> 0 and 4 -> 255
}
