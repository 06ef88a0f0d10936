package render

import (
	"bytes"
	"image/png"
	"math"
	"testing"

	"barygrid/grid"

	"gonum.org/v1/plot/vg"
)

func TestContactSheetNotBlank(t *testing.T) {
	f := grid.New(20, 30)
	for i := range f.Data {
		f.Data[i] = float64(i % 17)
	}
	im := Contact([]Tile{FieldTile("a", f), FieldTile("b", f), FieldTile("c", f)}, SheetSettings{Thumb: 64, Title: "group"})
	if im.Bounds().Dx() != 3*(64+8)+8 {
		t.Errorf("width %d", im.Bounds().Dx())
	}
	colours := map[uint32]bool{}
	for i := 0; i < len(im.Pix); i += 4 {
		colours[uint32(im.Pix[i])<<16|uint32(im.Pix[i+1])<<8|uint32(im.Pix[i+2])] = true
	}
	if len(colours) < 10 {
		t.Errorf("sheet looks blank: %d colours", len(colours))
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
