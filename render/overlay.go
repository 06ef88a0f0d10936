package render

import (
	"barygrid/gaussfit"
	"image"
	"image/color"
	"math"
)

// Ellipses draws the one-sigma ellipses of Gaussians (physical units, pixel
// size dx, dy) over a background image of the grid, scaled up by zoom:
// inputs as thin lines in the input colour, the barycenter as a thick line.
func Ellipses(bg image.Image, dx, dy float64, zoom int, inputs []gaussfit.Gaussian, bary gaussfit.Gaussian) *image.NRGBA {
	b := bg.Bounds()
	zoom = max(zoom, 1)
	out := image.NewNRGBA(image.Rect(0, 0, b.Dx()*zoom, b.Dy()*zoom))
	for y := 0; y < out.Bounds().Dy(); y++ {
		for x := 0; x < out.Bounds().Dx(); x++ {
			out.Set(x, y, bg.At(b.Min.X+x/zoom, b.Min.Y+y/zoom))
		}
	}
	inCol := color.NRGBA{170, 220, 255, 255}
	baryCol := color.NRGBA{255, 255, 255, 255}
	for _, g := range inputs {
		drawEllipse(out, gaussfit.EllipseOf(g), dx, dy, float64(zoom), inCol, 0)
	}
	drawEllipse(out, gaussfit.EllipseOf(bary), dx, dy, float64(zoom), baryCol, 1)
	return out
}

func drawEllipse(im *image.NRGBA, e gaussfit.Ellipse, dx, dy, zoom float64, c color.NRGBA, thick int) {
	ca, sa := math.Cos(e.Angle), math.Sin(e.Angle)
	n := int(8 * (e.Major/dx + e.Minor/dy) * zoom)
	n = max(64, min(n, 20000))
	for i := 0; i < n; i++ {
		t := 2 * math.Pi * float64(i) / float64(n)
		x := e.CX + e.Major*math.Cos(t)*ca - e.Minor*math.Sin(t)*sa
		y := e.CY + e.Major*math.Cos(t)*sa + e.Minor*math.Sin(t)*ca
		// Pixel centres sit at integer multiples of the pixel size.
		px := int(math.Round((x/dx + 0.5) * zoom))
		py := int(math.Round((y/dy + 0.5) * zoom))
		for oy := -thick; oy <= thick; oy++ {
			for ox := -thick; ox <= thick; ox++ {
				if image.Pt(px+ox, py+oy).In(im.Bounds()) {
					im.SetNRGBA(px+ox, py+oy, c)
				}
			}
		}
	}
}
