package netcdf

import (
	"encoding/binary"
	"fmt"
	"io"
	"math"

	"barygrid/grid"
)

// WriteSettings describe the variable Write stores.
type WriteSettings struct {
	// Variable names the data variable; empty means "field".
	Variable string
	// Units of the values (the CF units attribute); empty writes none.
	Units string
	// X0, Y0 are the coordinates of pixel (0, 0) in the field's unit, so
	// that a field read from NetCDF goes back with its own coordinates.
	X0, Y0 float64
}

// Write stores f as a NetCDF classic (CDF-1) file: dimensions y and x,
// coordinate variables y(y) and x(x) with the field's unit (its pixel size
// as their spacing, from X0, Y0), and the data variable (y, x) as doubles,
// with a Conventions attribute naming CF. Big-endian, as the format is.
func Write(w io.Writer, f *grid.Field, s WriteSettings) error {
	if len(f.Data) != f.Rows*f.Cols || f.Rows < 1 || f.Cols < 1 {
		return fmt.Errorf("netcdf: %w", grid.ErrShape)
	}
	name := s.Variable
	if name == "" {
		name = "field"
	}
	dx, dy := f.PixelSize()
	var h []byte
	u32 := func(v uint32) { h = binary.BigEndian.AppendUint32(h, v) }
	str := func(s string) {
		u32(uint32(len(s)))
		h = append(h, s...)
		for len(h)%4 != 0 {
			h = append(h, 0)
		}
	}
	textAttr := func(n, v string) {
		str(n)
		u32(2) // NC_CHAR
		str(v)
	}
	attrs := func(kv [][2]string) {
		var keep [][2]string
		for _, a := range kv {
			if a[1] != "" {
				keep = append(keep, a)
			}
		}
		if len(keep) == 0 {
			u32(0)
			u32(0)
			return
		}
		u32(0x0C)
		u32(uint32(len(keep)))
		for _, a := range keep {
			textAttr(a[0], a[1])
		}
	}
	// The header's size does not depend on the offsets (4 bytes each in
	// CDF-1), so it is built twice: once to measure, once with them.
	build := func(begin [3]uint32) {
		h = h[:0]
		h = append(h, 'C', 'D', 'F', 1)
		u32(0) // numrecs
		u32(0x0A)
		u32(2)
		str("y")
		u32(uint32(f.Rows))
		str("x")
		u32(uint32(f.Cols))
		attrs([][2]string{{"Conventions", "CF-1.8"}, {"source", "barygrid"}})
		u32(0x0B)
		u32(3)
		for i, v := range []struct {
			name  string
			dims  []uint32
			units string
			n     int
		}{{"y", []uint32{0}, f.Unit, f.Rows}, {"x", []uint32{1}, f.Unit, f.Cols}, {name, []uint32{0, 1}, s.Units, f.Rows * f.Cols}} {
			str(v.name)
			u32(uint32(len(v.dims)))
			for _, d := range v.dims {
				u32(d)
			}
			attrs([][2]string{{"units", v.units}})
			u32(6) // NC_DOUBLE
			u32(uint32(8 * v.n))
			u32(begin[i])
		}
	}
	build([3]uint32{})
	start := uint32(len(h))
	if uint64(start)+8*uint64(f.Rows+f.Cols+f.Rows*f.Cols) > math.MaxUint32 {
		return fmt.Errorf("netcdf: %d x %d values need the 64-bit offset format", f.Rows, f.Cols)
	}
	build([3]uint32{start, start + uint32(8*f.Rows), start + uint32(8*(f.Rows+f.Cols))})
	buf := h
	for r := 0; r < f.Rows; r++ {
		buf = binary.BigEndian.AppendUint64(buf, math.Float64bits(s.Y0+float64(r)*dy))
	}
	for c := 0; c < f.Cols; c++ {
		buf = binary.BigEndian.AppendUint64(buf, math.Float64bits(s.X0+float64(c)*dx))
	}
	for _, v := range f.Data {
		buf = binary.BigEndian.AppendUint64(buf, math.Float64bits(v))
	}
	_, err := w.Write(buf)
	return err
}
