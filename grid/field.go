package grid

import (
	"errors"
	"fmt"
	"math"
)

// Field is a rows x cols array of intensities stored row-major, with the
// physical size of a pixel along x (columns) and y (rows).
type Field struct {
	Rows, Cols int
	// Data holds Rows*Cols values, row after row.
	Data []float64
	// Dx and Dy are the pixel sizes along x and y; zero means 1.
	Dx, Dy float64
	// Unit names the physical unit of Dx and Dy ("um", "km"); empty means pixels.
	Unit string
	// X0 and Y0 are the coordinates of pixel (0, 0) in the file's own frame
	// (NetCDF coordinate variables), kept so that a result can be written
	// with its input's coordinates. Metadata only: moments and transport
	// place pixel (r, c) at (c Dx, r Dy).
	X0, Y0 float64
	// PixelSizeSource says where Dx and Dy came from: "default" (unit
	// pixels), "flag" (given by the user), or the file's own metadata
	// ("tiff-resolution", "ome", "geotiff", "netcdf-coordinates"). Empty
	// means not recorded.
	PixelSizeSource string
	// PixelSizeNote says how the file's metadata became Dx and Dy when
	// that took a conversion a user should know of (latitude-longitude
	// degrees to km at the domain's centre latitude); empty otherwise.
	PixelSizeNote string
}

// New returns a zero field of the given shape with unit pixel size.
func New(rows, cols int) *Field {
	return &Field{Rows: rows, Cols: cols, Data: make([]float64, rows*cols), Dx: 1, Dy: 1}
}

// FromRows builds a field from a slice of equal-length rows.
func FromRows(rows [][]float64) (*Field, error) {
	if len(rows) == 0 || len(rows[0]) == 0 {
		return nil, errors.New("grid: empty field")
	}
	f := New(len(rows), len(rows[0]))
	for r, row := range rows {
		if len(row) != f.Cols {
			return nil, fmt.Errorf("grid: row %d has %d values, want %d", r, len(row), f.Cols)
		}
		copy(f.Data[r*f.Cols:], row)
	}
	return f, nil
}

// At returns the value at row r, column c.
func (f *Field) At(r, c int) float64 { return f.Data[r*f.Cols+c] }

// Set sets the value at row r, column c.
func (f *Field) Set(r, c int, v float64) { f.Data[r*f.Cols+c] = v }

// PixelSize returns (dx, dy) with zero values replaced by 1.
func (f *Field) PixelSize() (dx, dy float64) {
	dx, dy = f.Dx, f.Dy
	if dx == 0 {
		dx = 1
	}
	if dy == 0 {
		dy = 1
	}
	return dx, dy
}

// Clone returns a deep copy.
func (f *Field) Clone() *Field {
	g := *f
	g.Data = append([]float64(nil), f.Data...)
	return &g
}

// Like returns a zero field with the shape, pixel size and unit of f.
func (f *Field) Like() *Field {
	g := *f
	g.Data = make([]float64, len(f.Data))
	return &g
}

// Mass returns the sum of all values (Kahan-compensated, so that large
// fields of small values keep their digits).
func (f *Field) Mass() float64 { return Sum(f.Data) }

// Sum returns the compensated sum of xs.
func Sum(xs []float64) float64 {
	var s, c float64
	for _, x := range xs {
		y := x - c
		t := s + y
		c = (t - s) - y
		s = t
	}
	return s
}

// MinMax returns the smallest and largest values.
func (f *Field) MinMax() (lo, hi float64) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, v := range f.Data {
		lo = math.Min(lo, v)
		hi = math.Max(hi, v)
	}
	return lo, hi
}

// Validation errors; Validate wraps them with the offending pixel.
var (
	ErrShape     = errors.New("grid: shape does not match data length")
	ErrNotFinite = errors.New("grid: value is not finite")
	ErrNegative  = errors.New("grid: value is negative")
	ErrZeroMass  = errors.New("grid: field has no positive mass")
	ErrPixelSize = errors.New("grid: pixel size must be finite and positive")
)

// PixelError reports the first offending pixel of a validation failure.
type PixelError struct {
	Row, Col int
	Value    float64
	Err      error
}

func (e *PixelError) Error() string {
	return fmt.Sprintf("%v at row %d, column %d (%g)", e.Err, e.Row, e.Col, e.Value)
}

func (e *PixelError) Unwrap() error { return e.Err }

// Validate checks that f can be read as a measure: consistent shape, finite
// positive pixel size, finite non-negative values and positive mass. Each
// violation is its own error; pixel errors name the first bad pixel.
func (f *Field) Validate() error {
	if f.Rows <= 0 || f.Cols <= 0 || len(f.Data) != f.Rows*f.Cols {
		return fmt.Errorf("%w (%d x %d, %d values)", ErrShape, f.Rows, f.Cols, len(f.Data))
	}
	dx, dy := f.PixelSize()
	if !(dx > 0 && dy > 0) || math.IsInf(dx, 0) || math.IsInf(dy, 0) {
		return fmt.Errorf("%w (dx=%g, dy=%g)", ErrPixelSize, dx, dy)
	}
	for i, v := range f.Data {
		switch {
		case math.IsNaN(v) || math.IsInf(v, 0):
			return &PixelError{i / f.Cols, i % f.Cols, v, ErrNotFinite}
		case v < 0:
			return &PixelError{i / f.Cols, i % f.Cols, v, ErrNegative}
		}
	}
	if m := f.Mass(); !(m > 0) || math.IsInf(m, 0) {
		return ErrZeroMass
	}
	return nil
}

// Normalize returns f divided by its mass, so that it sums to one.
func Normalize(f *Field) (*Field, error) {
	m := f.Mass()
	if !(m > 0) || math.IsInf(m, 0) {
		return nil, ErrZeroMass
	}
	g := f.Like()
	for i, v := range f.Data {
		g.Data[i] = v / m
	}
	return g, nil
}

// Scale returns s*f.
func Scale(f *Field, s float64) *Field {
	g := f.Like()
	for i, v := range f.Data {
		g.Data[i] = s * v
	}
	return g
}

// SameShape reports an error listing the shapes when fields differ in shape.
func SameShape(fs []*Field, names []string) error {
	if len(fs) == 0 {
		return nil
	}
	differ := false
	for _, f := range fs[1:] {
		if f.Rows != fs[0].Rows || f.Cols != fs[0].Cols {
			differ = true
		}
	}
	if !differ {
		return nil
	}
	msg := "grid: fields differ in shape:"
	for i, f := range fs {
		name := fmt.Sprintf("#%d", i+1)
		if i < len(names) {
			name = names[i]
		}
		msg += fmt.Sprintf(" %s %dx%d", name, f.Rows, f.Cols)
		if i == 7 && len(fs) > 8 {
			msg += fmt.Sprintf(" ... (%d fields)", len(fs))
			break
		}
	}
	return errors.New(msg)
}

// DefaultMaxPixels is the size limit of the readers when ReadLimits sets
// none: 2^28 pixels is 2 GiB as float64, a tenth of a 24 GiB machine, which
// leaves room for the solver's buffers.
const DefaultMaxPixels = 1 << 28

// ReadLimits bound what a reader accepts, checked against the size a file
// declares before any pixel buffer is allocated. Every file reader takes
// them (npy, csvgrid and imagefile name them ReadSettings). The zero value
// means DefaultMaxPixels.
type ReadLimits struct {
	MaxPixels int
}

// Pixels returns the pixel limit in force.
func (l ReadLimits) Pixels() int {
	if l.MaxPixels <= 0 {
		return DefaultMaxPixels
	}
	return l.MaxPixels
}

// Identical reports whether two fields have the same shape and the same
// values bit for bit (NaN equal to NaN): what a lossless round trip keeps.
func Identical(a, b *Field) bool {
	if a.Rows != b.Rows || a.Cols != b.Cols || len(a.Data) != len(b.Data) {
		return false
	}
	for i := range a.Data {
		if math.Float64bits(a.Data[i]) != math.Float64bits(b.Data[i]) {
			return false
		}
	}
	return true
}
