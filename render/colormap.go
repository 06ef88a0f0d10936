package render

import (
	"image"
	"image/color"
	"math"

	"barygrid/grid"
	"barygrid/io/imagefile"
)

// lagoon is barygrid's own 256-level colour map, "Lagoon": a path in the
// OKLab colour space (B. Ottosson 2020) whose lightness rises linearly from
// 0.16 to 0.96, so that brighter always means more mass, while the hue turns
// from blue (265 degrees in OKLab) towards yellow (70 degrees): near-black
// navy, dark teal, sea green, khaki, then cream white. Chroma is reduced
// where the path would leave the sRGB gamut, which keeps the lightness exact.
var lagoon = buildLagoon()

// Palette returns a copy of the colour map, 256 levels from low to high.
func Palette() color.Palette {
	p := make(color.Palette, len(lagoon))
	for i, c := range lagoon {
		p[i] = c
	}
	return p
}

// Colorize maps f through the colour map (256 levels) on the scale that s
// fixes, by default 0 to the field's maximum, and returns the scale used.
// (Unlike the gray writers it never keeps integer values as they are: that
// keeps numbers exact in a file, but would paint counts of 0..4 black.)
func Colorize(f *grid.Field, s imagefile.WriteSettings) (*image.NRGBA, imagefile.Scaling) {
	s.EightBit = true
	if !(s.Max > s.Min) {
		_, hi := f.MinMax()
		if !(hi > 0) {
			hi = 1
		}
		s.Min, s.Max = 0, hi
	}
	sc := s.ScalingOf(f)
	im := image.NewNRGBA(image.Rect(0, 0, f.Cols, f.Rows))
	for i, v := range f.Data {
		c := lagoon[sc.Sample(v)]
		o := (i/f.Cols)*im.Stride + 4*(i%f.Cols)
		im.Pix[o], im.Pix[o+1], im.Pix[o+2], im.Pix[o+3] = c.R, c.G, c.B, 255
	}
	return im, sc
}

func buildLagoon() [256]color.NRGBA {
	var m [256]color.NRGBA
	for i := range m {
		t := float64(i) / 255
		L := 0.16 + 0.80*t
		h := (265 - 195*t) * math.Pi / 180
		c := 0.02 + 0.13*math.Pow(math.Sin(math.Pi*math.Min(1, t*1.1)), 0.7)
		// Shrink chroma until the colour is inside the gamut.
		for ; c >= 0; c -= 0.002 {
			r, g, b := oklabToLinear(L, c*math.Cos(h), c*math.Sin(h))
			if r >= 0 && r <= 1 && g >= 0 && g <= 1 && b >= 0 && b <= 1 {
				m[i] = color.NRGBA{linearToSRGB(r), linearToSRGB(g), linearToSRGB(b), 255}
				break
			}
		}
		if c < 0 {
			r, g, b := oklabToLinear(L, 0, 0)
			m[i] = color.NRGBA{linearToSRGB(r), linearToSRGB(g), linearToSRGB(b), 255}
		}
	}
	return m
}

// oklabToLinear converts OKLab to linear sRGB (Ottosson 2020, published matrices).
func oklabToLinear(L, a, b float64) (float64, float64, float64) {
	l := L + 0.3963377774*a + 0.2158037573*b
	m := L - 0.1055613458*a - 0.0638541728*b
	s := L - 0.0894841775*a - 1.2914855480*b
	l, m, s = l*l*l, m*m*m, s*s*s
	return 4.0767416621*l - 3.3077115913*m + 0.2309699292*s,
		-1.2684380046*l + 2.6097574011*m - 0.3413193965*s,
		-0.0041960863*l - 0.7034186147*m + 1.7076147010*s
}

// linearToOKLabL returns the OKLab lightness of a linear sRGB colour.
func linearToOKLabL(r, g, b float64) float64 {
	l := math.Cbrt(0.4122214708*r + 0.5363288741*g + 0.0514459929*b)
	m := math.Cbrt(0.2119034982*r + 0.6806995451*g + 0.1073969566*b)
	s := math.Cbrt(0.0883024619*r + 0.2817188376*g + 0.6299787005*b)
	return 0.2104542553*l + 0.7936177850*m - 0.0040720468*s
}

// linearToSRGB applies the sRGB transfer function (IEC 61966-2-1).
func linearToSRGB(x float64) uint8 {
	if x <= 0.0031308 {
		x *= 12.92
	} else {
		x = 1.055*math.Pow(x, 1/2.4) - 0.055
	}
	return uint8(math.Round(math.Max(0, math.Min(1, x)) * 255))
}

// srgbToLinear inverts the sRGB transfer function of an 8-bit sample.
func srgbToLinear(v uint8) float64 {
	x := float64(v) / 255
	if x <= 0.04045 {
		return x / 12.92
	}
	return math.Pow((x+0.055)/1.055, 2.4)
}
