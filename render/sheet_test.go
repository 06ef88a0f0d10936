package render

import (
	"bytes"
	"image/png"
	"math"
	"testing"

	"barygrid/grid"

	"gonum.org/v1/plot/vg"
)

// Each field lands in its tile, scaled to it, through the colour map: a
// 16 x 32 left-to-right ramp in a 64-pixel tile is 64 x 32 pixels wide
// and centred, its left column has the map's lowest colour and its right
// column the highest, and the second tile holds the same picture.
func TestContactSheetPlacesFields(t *testing.T) {
	f := grid.New(16, 32)
	for i := range f.Data {
		f.Data[i] = float64(i % 32)
	}
	im := Contact([]Tile{FieldTile("a", f), FieldTile("b", f)}, SheetSettings{Thumb: 64, Title: "group"})
	const pad, head = 8, 22
	if im.Bounds().Dx() != 2*(64+pad)+pad {
		t.Errorf("width %d", im.Bounds().Dx())
	}
	// Tile 1 spans x in [8, 72); the 64 x 32 picture sits at y 22+16.
	y := head + (64-32)/2 + 5
	for tile := 0; tile < 2; tile++ {
		x0 := pad + tile*(64+pad)
		if c := im.NRGBAAt(x0, y); c != lagoon[0] {
			t.Errorf("tile %d: left column %v, want the map's lowest %v", tile+1, c, lagoon[0])
		}
		if c := im.NRGBAAt(x0+63, y); c != lagoon[255] {
			t.Errorf("tile %d: right column %v, want the map's highest %v", tile+1, c, lagoon[255])
		}
		if c := im.NRGBAAt(x0+10, head+2); c != paper {
			t.Errorf("tile %d: above the picture %v, want the paper", tile+1, c)
		}
	}
}

func TestConvergencePNG(t *testing.T) {
	var r []float64
	for i := 0; i < 50; i++ {
		r = append(r, math.Pow(0.8, float64(i)))
	}
	var buf bytes.Buffer
	if err := Convergence(&buf, r, 1e-3, "test", 4*vg.Inch, 3*vg.Inch); err != nil {
		t.Fatal(err)
	}
	im, err := png.Decode(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if b := im.Bounds(); b.Dx() < 200 || b.Dy() < 150 {
		t.Errorf("plot size %v", b)
	}
}
