package render

import (
	"fmt"
	"image"
	"image/color"
	"math"

	"barygrid/grid"
	"barygrid/io/imagefile"
)

// Arrows draws displacement arrows (physical units) over a picture of the
// grid, scaled up by zoom: one arrow every step pixels where mask is true,
// from the pixel to where its displacement points, with a dot at the tip.
func Arrows(bg image.Image, dx, dy *grid.Field, mask []bool, step, zoom int) *image.NRGBA {
	b := bg.Bounds()
	zoom, step = max(zoom, 1), max(step, 1)
	out := image.NewNRGBA(image.Rect(0, 0, b.Dx()*zoom, b.Dy()*zoom))
	for y := 0; y < out.Bounds().Dy(); y++ {
		for x := 0; x < out.Bounds().Dx(); x++ {
			out.Set(x, y, bg.At(b.Min.X+x/zoom, b.Min.Y+y/zoom))
		}
	}
	px, py := dx.PixelSize()
	shaft := color.NRGBA{255, 255, 255, 255}
	tip := color.NRGBA{255, 120, 60, 255}
	for r := step / 2; r < dx.Rows; r += step {
		for c := step / 2; c < dx.Cols; c += step {
			i := r*dx.Cols + c
			if mask != nil && !mask[i] {
				continue
			}
			x0, y0 := (float64(c)+0.5)*float64(zoom), (float64(r)+0.5)*float64(zoom)
			x1, y1 := x0+dx.Data[i]/px*float64(zoom), y0+dy.Data[i]/py*float64(zoom)
			n := int(math.Ceil(math.Hypot(x1-x0, y1-y0))) + 1
			for k := 0; k <= n; k++ {
				t := float64(k) / float64(n)
				out.Set(int(x0+t*(x1-x0)), int(y0+t*(y1-y0)), shaft)
			}
			for ox := -1; ox <= 1; ox++ {
				for oy := -1; oy <= 1; oy++ {
					out.Set(int(x1)+ox, int(y1)+oy, tip)
				}
			}
		}
	}
	return out
}

// WithColorBar colours f (0 to its maximum, or lo to hi when hi > lo) and
// adds a bar below it labelled with the values at its ends and the unit:
// a map in physical units that reads without the report.
func WithColorBar(f *grid.Field, unit string, zoom int) *image.NRGBA {
	zoom = max(zoom, 1)
	im, sc := Colorize(f, imagefile.WriteSettings{})
	w, h := f.Cols*zoom, f.Rows*zoom
	w = max(w, 160)
	const bar, label = 12, 16
	out := image.NewNRGBA(image.Rect(0, 0, w, h+bar+label+8))
	for y := range out.Bounds().Dy() {
		for x := range w {
			out.Set(x, y, paper)
		}
	}
	for y := 0; y < f.Rows*zoom; y++ {
		for x := 0; x < f.Cols*zoom; x++ {
			out.Set(x, y, im.At(x/zoom, y/zoom))
		}
	}
	for x := 0; x < w; x++ {
		c := lagoon[x*255/max(1, w-1)]
		for y := h + 4; y < h+4+bar; y++ {
			out.Set(x, y, c)
		}
	}
	text(out, 2, h+4+bar+label-4, fmt.Sprintf("%.3g", sc.Min))
	hi := fmt.Sprintf("%.3g %s", sc.Max, unit)
	text(out, w-7*len(hi)-2, h+4+bar+label-4, hi)
	return out
}
