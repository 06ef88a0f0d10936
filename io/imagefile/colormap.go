package imagefile

import (
	"image/color"
	"math"
)

// Ember is barygrid's own 256-level colour map: a path in the OKLab colour
// space (B. Ottosson 2020) whose lightness rises linearly from 0.16 to 0.96,
// so that brighter always means more mass, while the hue turns from deep
// blue through violet and red to pale amber. Chroma is reduced where the path
// would leave the sRGB gamut, which keeps the lightness exact.
var Ember = buildEmber()

func buildEmber() [256]color.NRGBA {
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
				m[i] = color.NRGBA{enc(r), enc(g), enc(b), 255}
				break
			}
		}
		if c < 0 {
			r, g, b := oklabToLinear(L, 0, 0)
			m[i] = color.NRGBA{enc(r), enc(g), enc(b), 255}
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

// LinearToOKLabL returns the OKLab lightness of a linear sRGB colour.
func LinearToOKLabL(r, g, b float64) float64 {
	l := math.Cbrt(0.4122214708*r + 0.5363288741*g + 0.0514459929*b)
	m := math.Cbrt(0.2119034982*r + 0.6806995451*g + 0.1073969566*b)
	s := math.Cbrt(0.0883024619*r + 0.2817188376*g + 0.6299787005*b)
	return 0.2104542553*l + 0.7936177850*m - 0.0040720468*s
}

// enc applies the sRGB transfer function (IEC 61966-2-1).
func enc(x float64) uint8 {
	if x <= 0.0031308 {
		x *= 12.92
	} else {
		x = 1.055*math.Pow(x, 1/2.4) - 0.055
	}
	return uint8(math.Round(math.Max(0, math.Min(1, x)) * 255))
}

// Decode inverts the sRGB transfer function of an 8-bit sample.
func Decode(v uint8) float64 {
	x := float64(v) / 255
	if x <= 0.04045 {
		return x / 12.92
	}
	return math.Pow((x+0.055)/1.055, 2.4)
}
