package render

import (
	"image"
	"testing"

	"barygrid/gaussfit"

	"gonum.org/v1/gonum/mat"
)

// The one-sigma ellipse of a Gaussian with variances 25 and 9 has semi-axes
// 5 and 3 pixels (standard fact), drawn around the mean, not on it.
func TestEllipsesDrawn(t *testing.T) {
	bg := image.NewGray(image.Rect(0, 0, 32, 32))
	g := gaussfit.Gaussian{Mean: []float64{16, 16}, Cov: mat.NewSymDense(2, []float64{25, 0, 0, 9})}
	im := Ellipses(bg, 1, 1, 2, []gaussfit.Gaussian{g}, g)
	if im.Bounds().Dx() != 64 {
		t.Fatalf("size %v", im.Bounds())
	}
	// The major semi-axis is 5 px along x: (16+5+0.5)*2 = 43 on the row of the centre.
	if c := im.NRGBAAt(43, 33); c.R != 255 {
		t.Errorf("no ellipse at the end of the major axis: %v", c)
	}
	if c := im.NRGBAAt(33, 33); c.R != 0 {
		t.Errorf("centre painted: %v", c)
	}
}
