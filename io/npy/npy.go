package npy

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"

	"barygrid/grid"

	npyio "codeberg.org/sbinet/npyio/npy"
	"gonum.org/v1/gonum/mat"
)

// ReadSettings bound what Read accepts (grid.ReadLimits).
type ReadSettings = grid.ReadLimits

var dtypeRE = regexp.MustCompile(`^'([<>|=])([a-zA-Z])(\d+)'$`)

// Read decodes a .npy file held in data.
func Read(data []byte, s ReadSettings) (f *grid.Field, err error) {
	limit := s.Pixels()
	if !bytes.HasPrefix(data, []byte("\x93NUMPY")) {
		return nil, fmt.Errorf("npy: not a NumPy file (bad magic)")
	}
	if err := checkHeader(data); err != nil {
		return nil, err
	}
	// The library's header parser indexes slices without bounds checks on
	// malformed headers; turn any panic into an error.
	defer func() {
		if r := recover(); r != nil {
			f, err = nil, fmt.Errorf("npy: malformed header (%v)", r)
		}
	}()
	br := bytes.NewReader(data)
	rd, err := npyio.NewReader(br)
	if err != nil {
		return nil, fmt.Errorf("npy: %w", err)
	}
	d := rd.Header.Descr
	if len(d.Shape) != 2 {
		return nil, fmt.Errorf("npy: array has shape %v, want 2-D", d.Shape)
	}
	rows, cols := d.Shape[0], d.Shape[1]
	if rows <= 0 || cols <= 0 {
		return nil, fmt.Errorf("npy: empty array (shape %v)", d.Shape)
	}
	if int64(rows)*int64(cols) > int64(limit) {
		return nil, fmt.Errorf("npy: array declares %d x %d elements, more than the limit of %d", rows, cols, limit)
	}
	m := dtypeRE.FindStringSubmatch(d.Type)
	if m == nil {
		return nil, fmt.Errorf("npy: unsupported dtype %s", d.Type)
	}
	kind, size := m[2], m[3]
	n, _ := strconv.Atoi(size)
	switch {
	case kind == "f" && (n == 4 || n == 8):
	case (kind == "i" || kind == "u") && (n == 1 || n == 2 || n == 4 || n == 8):
	case kind == "c":
		return nil, fmt.Errorf("npy: complex dtype %s is not an intensity", d.Type)
	default:
		return nil, fmt.Errorf("npy: unsupported dtype %s", d.Type)
	}
	if want := int64(rows) * int64(cols) * int64(n); int64(br.Len()) < want {
		return nil, fmt.Errorf("npy: truncated data: %d bytes, want %d", br.Len(), want)
	}
	vals, err := readAs(rd, kind, n)
	if err != nil {
		return nil, fmt.Errorf("npy: %w", err)
	}
	f = grid.New(rows, cols)
	if d.Fortran {
		for c := 0; c < cols; c++ {
			for r := 0; r < rows; r++ {
				f.Data[r*cols+c] = vals[c*rows+r]
			}
		}
	} else {
		copy(f.Data, vals)
	}
	return f, nil
}

// checkHeader bounds the declared header length by the file size, so that a
// corrupt length cannot make the library allocate gigabytes.
func checkHeader(data []byte) error {
	if len(data) < 10 {
		return fmt.Errorf("npy: truncated header")
	}
	var hl, off int
	switch data[6] {
	case 1:
		hl, off = int(data[8])|int(data[9])<<8, 10
	case 2, 3:
		if len(data) < 12 {
			return fmt.Errorf("npy: truncated header")
		}
		hl, off = int(data[8])|int(data[9])<<8|int(data[10])<<16|int(data[11])<<24, 12
	default:
		return fmt.Errorf("npy: unknown format version %d", data[6])
	}
	if hl < 0 || off+hl > len(data) {
		return fmt.Errorf("npy: truncated header")
	}
	h := string(data[off : off+hl])
	if !strings.Contains(h, "\n") || !strings.Contains(h, "}") {
		return fmt.Errorf("npy: malformed header")
	}
	return nil
}

func readAs(rd *npyio.Reader, kind string, n int) ([]float64, error) {
	conv := func(err error, xs []float64) ([]float64, error) { return xs, err }
	switch kind + strconv.Itoa(n) {
	case "f8":
		var v []float64
		err := rd.Read(&v)
		return v, err
	case "f4":
		var v []float32
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "i1":
		var v []int8
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "i2":
		var v []int16
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "i4":
		var v []int32
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "i8":
		var v []int64
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "u1":
		var v []uint8
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "u2":
		var v []uint16
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "u4":
		var v []uint32
		err := rd.Read(&v)
		return conv(err, widen(v))
	case "u8":
		var v []uint64
		err := rd.Read(&v)
		return conv(err, widen(v))
	}
	return nil, fmt.Errorf("unsupported dtype")
}

type number interface {
	~float32 | ~int8 | ~int16 | ~int32 | ~int64 | ~uint8 | ~uint16 | ~uint32 | ~uint64
}

func widen[T number](xs []T) []float64 {
	out := make([]float64, len(xs))
	for i, x := range xs {
		out[i] = float64(x)
	}
	return out
}

// Write stores f as a little-endian float64 C-order array, exactly.
func Write(w io.Writer, f *grid.Field) error {
	if len(f.Data) != f.Rows*f.Cols {
		return fmt.Errorf("npy: %w", grid.ErrShape)
	}
	if err := npyio.Write(w, mat.NewDense(f.Rows, f.Cols, f.Data)); err != nil {
		return fmt.Errorf("npy: %w", err)
	}
	return nil
}

// WriteArray stores a C-order float64 array of any shape (for example the
// H x W x 2 displacement fields), little-endian, in NPY format 1.0 (the
// header padded so that the data start at a multiple of 64 bytes).
func WriteArray(w io.Writer, shape []int, data []float64) error {
	n := 1
	dims := make([]string, len(shape))
	for i, d := range shape {
		if d < 0 {
			return fmt.Errorf("npy: negative dimension %d", d)
		}
		n *= d
		dims[i] = strconv.Itoa(d)
	}
	if n != len(data) {
		return fmt.Errorf("npy: %w: shape %v holds %d values, got %d", grid.ErrShape, shape, n, len(data))
	}
	tuple := strings.Join(dims, ", ")
	if len(shape) == 1 {
		tuple += ","
	}
	header := fmt.Sprintf("{'descr': '<f8', 'fortran_order': False, 'shape': (%s), }", tuple)
	total := 10 + len(header) + 1
	header += strings.Repeat(" ", (64-total%64)%64) + "\n"
	buf := make([]byte, 10, 10+len(header)+8*len(data))
	copy(buf, "\x93NUMPY\x01\x00")
	binary.LittleEndian.PutUint16(buf[8:], uint16(len(header)))
	buf = append(buf, header...)
	for _, v := range data {
		buf = binary.LittleEndian.AppendUint64(buf, math.Float64bits(v))
	}
	_, err := w.Write(buf)
	return err
}
