package render

import (
	"image"
	"image/gif"
	"math"

	"barygrid/grid"
)

// Animation returns the frames as an animated GIF through the colour map,
// on one common scale (the largest value over all frames) so that
// brightness compares across frames; delay is per frame in hundredths of a
// second.
func Animation(frames []*grid.Field, delay int) *gif.GIF {
	var top float64
	for _, f := range frames {
		_, hi := f.MinMax()
		top = math.Max(top, hi)
	}
	if !(top > 0) {
		top = 1
	}
	pal := Palette()
	anim := &gif.GIF{}
	for _, f := range frames {
		im := image.NewPaletted(image.Rect(0, 0, f.Cols, f.Rows), pal)
		for i, v := range f.Data {
			q := int(math.Round(v / top * 255))
			im.Pix[(i/f.Cols)*im.Stride+i%f.Cols] = uint8(max(0, min(255, q)))
		}
		anim.Image = append(anim.Image, im)
		anim.Delay = append(anim.Delay, delay)
	}
	return anim
}
