package imagefile

import (
	"encoding/binary"
	"fmt"
	"image"
	"image/png"
	"io"
	"math"

	"barygrid/grid"
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

// WriteTIFF writes f as an uncompressed grayscale TIFF (16-bit unless
// EightBit). When the field's unit is a length (nm, um, mm, cm, m, km) its
// pixel size goes into the baseline resolution tags (pixels per
// centimetre, TIFF 6.0), so that reading the file back keeps it.
func WriteTIFF(w io.Writer, f *grid.Field, s WriteSettings) (Scaling, error) {
	im, sc := Gray(f, s)
	bits, bps := 16, 2
	if s.EightBit {
		bits, bps = 8, 1
	}
	pix := make([]byte, 0, f.Rows*f.Cols*bps)
	switch g := im.(type) {
	case *image.Gray:
		for r := 0; r < f.Rows; r++ {
			pix = append(pix, g.Pix[r*g.Stride:r*g.Stride+f.Cols]...)
		}
	case *image.Gray16:
		for r := 0; r < f.Rows; r++ {
			for c := 0; c < f.Cols; c++ {
				o := r*g.Stride + 2*c
				pix = append(pix, g.Pix[o+1], g.Pix[o]) // little-endian samples
			}
		}
	}
	type entry struct {
		tag, typ uint16
		count    uint32
		value    uint32 // inline value, or offset for rationals
	}
	dx, dy := f.PixelSize()
	cm := lengthInCM(f.Unit)
	var entries []entry
	// Layout: header (8), pixel data, then two rationals, then the IFD.
	dataOff := uint32(8)
	ratOff := dataOff + uint32(len(pix))
	ifdOff := ratOff + 16
	entries = append(entries,
		entry{256, 4, 1, uint32(f.Cols)}, entry{257, 4, 1, uint32(f.Rows)},
		entry{258, 3, 1, uint32(bits)}, entry{259, 3, 1, 1}, entry{262, 3, 1, 1},
		entry{273, 4, 1, dataOff}, entry{277, 3, 1, 1}, entry{278, 4, 1, uint32(f.Rows)},
		entry{279, 4, 1, uint32(len(pix))})
	var rat [16]byte
	if cm > 0 {
		// Pixels per centimetre as a rational, the denominator as large as
		// the 32-bit numerator allows (relative error below 1e-9).
		for i, d := range []float64{dx, dy} {
			ppcm := 1 / (d * cm)
			den := math.Max(1, math.Min(1<<30, math.Floor(4e9/ppcm)))
			num := math.Min(math.Round(ppcm*den), math.MaxUint32)
			binary.LittleEndian.PutUint32(rat[8*i:], uint32(num))
			binary.LittleEndian.PutUint32(rat[8*i+4:], uint32(den))
		}
		entries = append(entries, entry{282, 5, 1, ratOff}, entry{283, 5, 1, ratOff + 8}, entry{296, 3, 1, 3})
	}
	buf := make([]byte, 0, int(ifdOff)+2+12*len(entries)+4)
	buf = append(buf, 'I', 'I', 42, 0)
	buf = binary.LittleEndian.AppendUint32(buf, ifdOff)
	buf = append(buf, pix...)
	buf = append(buf, rat[:]...)
	buf = binary.LittleEndian.AppendUint16(buf, uint16(len(entries)))
	for _, e := range entries {
		buf = binary.LittleEndian.AppendUint16(buf, e.tag)
		buf = binary.LittleEndian.AppendUint16(buf, e.typ)
		buf = binary.LittleEndian.AppendUint32(buf, e.count)
		if e.typ == 3 {
			buf = binary.LittleEndian.AppendUint16(buf, uint16(e.value))
			buf = append(buf, 0, 0)
		} else {
			buf = binary.LittleEndian.AppendUint32(buf, e.value)
		}
	}
	buf = binary.LittleEndian.AppendUint32(buf, 0)
	if _, err := w.Write(buf); err != nil {
		return sc, fmt.Errorf("imagefile: %w", err)
	}
	return sc, nil
}
