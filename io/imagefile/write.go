package imagefile

import (
	"fmt"
	"image"
	"image/png"
	"io"
	"math"

	"barygrid/grid"

	"golang.org/x/image/tiff"
)

// Scaling records how field values were mapped to stored samples:
// sample = round((value - Min) / (Max - Min) * MaxSample), clipped.
type Scaling struct {
	Min, Max  float64
	MaxSample int
}

// String describes the scaling for reports.
func (s Scaling) String() string {
	return fmt.Sprintf("linear, %g -> 0 and %g -> %d", s.Min, s.Max, s.MaxSample)
}

// Invert maps a stored sample back to the field value it stands for.
func (s Scaling) Invert(sample float64) float64 {
	return s.Min + sample/float64(s.MaxSample)*(s.Max-s.Min)
}

// WriteSettings choose the stored scale. The zero value stores 16-bit
// samples scaled from 0 to the field's maximum, which keeps integer-valued
// fields of 0..65535 exact.
type WriteSettings struct {
	// EightBit stores 8-bit samples.
	EightBit bool
	// Min and Max fix the value range; Max <= Min means 0 to the maximum,
	// except that fields whose values are already integers within the sample
	// range are stored as they are (scale 1), so they read back unchanged.
	Min, Max float64
}

// ScalingOf returns the scaling these settings give the field.
func (s WriteSettings) ScalingOf(f *grid.Field) Scaling {
	top := 65535
	if s.EightBit {
		top = 255
	}
	if s.Max > s.Min {
		return Scaling{s.Min, s.Max, top}
	}
	lo, hi := f.MinMax()
	if lo >= 0 && hi <= float64(top) && integral(f.Data) {
		return Scaling{0, float64(top), top}
	}
	if !(hi > 0) {
		hi = 1
	}
	return Scaling{0, hi, top}
}

func integral(xs []float64) bool {
	for _, v := range xs {
		if v != math.Trunc(v) {
			return false
		}
	}
	return true
}

// Sample returns the stored sample for a value (rounded and clipped).
func (s Scaling) Sample(v float64) uint16 { return quantise(v, s) }

func quantise(v float64, s Scaling) uint16 {
	q := math.Round((v - s.Min) / (s.Max - s.Min) * float64(s.MaxSample))
	if !(q > 0) { // also NaN
		return 0
	}
	if q > float64(s.MaxSample) {
		return uint16(s.MaxSample)
	}
	return uint16(q)
}

// Gray returns the field as a grayscale image with the scaling used.
func Gray(f *grid.Field, s WriteSettings) (image.Image, Scaling) {
	sc := s.ScalingOf(f)
	rect := image.Rect(0, 0, f.Cols, f.Rows)
	if s.EightBit {
		im := image.NewGray(rect)
		for i, v := range f.Data {
			im.Pix[(i/f.Cols)*im.Stride+i%f.Cols] = uint8(quantise(v, sc))
		}
		return im, sc
	}
	im := image.NewGray16(rect)
	for i, v := range f.Data {
		q := quantise(v, sc)
		o := (i/f.Cols)*im.Stride + 2*(i%f.Cols)
		im.Pix[o], im.Pix[o+1] = uint8(q>>8), uint8(q)
	}
	return im, sc
}

// WritePNG writes f as a grayscale PNG.
func WritePNG(w io.Writer, f *grid.Field, s WriteSettings) (Scaling, error) {
	im, sc := Gray(f, s)
	if err := png.Encode(w, im); err != nil {
		return sc, fmt.Errorf("imagefile: %w", err)
	}
	return sc, nil
}

// WriteTIFF writes f as a grayscale TIFF (16-bit unless EightBit).
func WriteTIFF(w io.Writer, f *grid.Field, s WriteSettings) (Scaling, error) {
	im, sc := Gray(f, s)
	if err := tiff.Encode(w, im, &tiff.Options{Compression: tiff.Deflate}); err != nil {
		return sc, fmt.Errorf("imagefile: %w", err)
	}
	return sc, nil
}
