package imagefile

import (
	"bytes"
	"errors"
	"fmt"
	"image"
	"image/color"
	_ "image/jpeg" // registered decoders: Read sniffs the format
	_ "image/png"
	"io"

	"barygrid/grid"

	_ "golang.org/x/image/bmp"
	_ "golang.org/x/image/tiff"
)

// ReadSettings bound what Read accepts (grid.ReadLimits).
type ReadSettings = grid.ReadLimits

// Read decodes an image held in data. The format is taken from the content.
func Read(data []byte, s ReadSettings) (f *grid.Field, err error) {
	limit := s.Pixels()
	cfg, format, err := image.DecodeConfig(bytes.NewReader(data))
	if err != nil {
		return nil, fmt.Errorf("imagefile: %w", err)
	}
	if cfg.Width <= 0 || cfg.Height <= 0 {
		return nil, fmt.Errorf("imagefile: %s declares an empty image (%d x %d)", format, cfg.Width, cfg.Height)
	}
	if int64(cfg.Width)*int64(cfg.Height) > int64(limit) {
		return nil, fmt.Errorf("imagefile: %s declares %d x %d pixels, more than the limit of %d", format, cfg.Width, cfg.Height, limit)
	}
	// Third-party decoders may panic on hostile input; a bad file must be an
	// error, never a crash.
	defer func() {
		if r := recover(); r != nil {
			f, err = nil, fmt.Errorf("imagefile: corrupt %s data (%v)", format, r)
		}
	}()
	img, _, err := image.Decode(bytes.NewReader(data))
	if err != nil {
		if errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) {
			return nil, fmt.Errorf("imagefile: truncated %s data", format)
		}
		return nil, fmt.Errorf("imagefile: %s: %w", format, err)
	}
	f = FromImage(img)
	if format == "tiff" {
		if dx, dy, unit, src, ok := tiffPixelSize(data); ok {
			f.Dx, f.Dy, f.Unit, f.PixelSizeSource = dx, dy, unit, src
		}
	}
	return f, nil
}

// FromImage converts a decoded image to a field with unit pixel size.
func FromImage(img image.Image) *grid.Field {
	b := img.Bounds()
	f := grid.New(b.Dy(), b.Dx())
	switch im := img.(type) {
	case *image.Gray:
		for r := 0; r < f.Rows; r++ {
			row := im.Pix[r*im.Stride : r*im.Stride+f.Cols]
			for c, v := range row {
				f.Data[r*f.Cols+c] = float64(v)
			}
		}
		return f
	case *image.Gray16:
		for r := 0; r < f.Rows; r++ {
			row := im.Pix[r*im.Stride : r*im.Stride+2*f.Cols]
			for c := 0; c < f.Cols; c++ {
				f.Data[r*f.Cols+c] = float64(uint16(row[2*c])<<8 | uint16(row[2*c+1]))
			}
		}
		return f
	}
	// Everything else through the 16-bit colour model; 8-bit sources come
	// back on their own scale by dividing by 257 (0xFFFF / 0xFF).
	scale := 1.0
	if is8bit(img.ColorModel()) {
		scale = 1.0 / 257
	}
	for r := 0; r < f.Rows; r++ {
		for c := 0; c < f.Cols; c++ {
			cr, cg, cb, _ := img.At(b.Min.X+c, b.Min.Y+r).RGBA()
			// RGBA is alpha-premultiplied: transparency already scales the value.
			y := 0.2126*float64(cr) + 0.7152*float64(cg) + 0.0722*float64(cb)
			f.Data[r*f.Cols+c] = y * scale
		}
	}
	return f
}

func is8bit(m color.Model) bool {
	switch m {
	case color.RGBA64Model, color.NRGBA64Model, color.Gray16Model, color.Alpha16Model:
		return false
	}
	return true
}
