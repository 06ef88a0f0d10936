package netcdf

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"barygrid/grid"
)

// ErrFormat reports a file this reader cannot take; ErrFill, fill or
// missing values that Settings.FillAsZero would read as zero.
var (
	ErrFormat = errors.New("netcdf")
	ErrFill   = fmt.Errorf("%w: fill or missing value", ErrFormat)
)

// Settings choose what to read. The zero value reads the only 2-D-capable
// variable, slice 0 along leading dimensions, and refuses fill values.
type Settings struct {
	// Variable names the variable; empty means the only variable with at
	// least two dimensions that is not a coordinate variable.
	Variable string
	// Index fixes the dimensions other than the last two, by name; those
	// not given are taken at 0 when they have length 1, else an error.
	Index map[string]int
	// FillAsZero maps fill and missing values to zero instead of refusing
	// them.
	FillAsZero bool
	// Limits bound the slice's size before anything is allocated.
	Limits grid.ReadLimits
	// Degrees keeps latitude-longitude coordinates in degrees; by default
	// they are converted to km at the domain's centre latitude.
	Degrees bool
}

// Info says what was read.
type Info struct {
	Variable string
	Dims     []string // of the variable, slowest first
	Units    string   // the variable's units attribute
	// PixelUnit is the unit of the pixel size: the coordinates' units, or
	// km when latitude-longitude degrees were converted.
	PixelUnit string
	// Note explains a conversion (degrees to km) or why the pixel size is
	// the default.
	Note string
	// Planes is the number of 2-D slices along the leading dimensions.
	Planes int
}

type dim struct {
	name   string
	length int64
}

type attr struct {
	name   string
	typ    int
	values []float64
	text   string
}

type variable struct {
	name   string
	dims   []int
	attrs  []attr
	typ    int
	vsize  int64
	begin  int64
	record bool
}

type file struct {
	version  byte
	numrecs  int64
	dims     []dim
	vars     []variable
	recsize  int64
	data     []byte
	attrText map[string]string
}

type reader struct {
	b       []byte
	p       int
	version byte
	err     error
}

func (r *reader) need(n int) bool {
	if r.err != nil {
		return false
	}
	if n < 0 || r.p+n > len(r.b) {
		r.err = fmt.Errorf("%w: truncated header", ErrFormat)
		return false
	}
	return true
}

func (r *reader) u32() int64 {
	if !r.need(4) {
		return 0
	}
	v := binary.BigEndian.Uint32(r.b[r.p:])
	r.p += 4
	return int64(v)
}

func (r *reader) u64() int64 {
	if !r.need(8) {
		return 0
	}
	v := binary.BigEndian.Uint64(r.b[r.p:])
	r.p += 8
	if v > math.MaxInt64/2 {
		r.err = fmt.Errorf("%w: a size of %d in the header", ErrFormat, v)
		return 0
	}
	return int64(v)
}

// count reads a non-negative count: 4 bytes, 8 in CDF-5.
func (r *reader) count() int64 {
	if r.version == 5 {
		return r.u64()
	}
	return r.u32()
}

func (r *reader) name() string {
	n := r.count()
	if n > 1<<16 {
		r.err = fmt.Errorf("%w: a name of %d bytes", ErrFormat, n)
		return ""
	}
	pad := int((n + 3) / 4 * 4)
	if !r.need(pad) {
		return ""
	}
	s := string(r.b[r.p : r.p+int(n)])
	r.p += pad
	return s
}

var typeSize = map[int]int{1: 1, 2: 1, 3: 2, 4: 4, 5: 4, 6: 8, 7: 1, 8: 2, 9: 4, 10: 8, 11: 8}

// decode reads n values of type typ at b.
func decode(b []byte, typ int, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		switch typ {
		case 1:
			out[i] = float64(int8(b[i]))
		case 2, 7:
			out[i] = float64(b[i])
		case 3:
			out[i] = float64(int16(binary.BigEndian.Uint16(b[2*i:])))
		case 4:
			out[i] = float64(int32(binary.BigEndian.Uint32(b[4*i:])))
		case 5:
			out[i] = float64(math.Float32frombits(binary.BigEndian.Uint32(b[4*i:])))
		case 6:
			out[i] = math.Float64frombits(binary.BigEndian.Uint64(b[8*i:]))
		case 8:
			out[i] = float64(binary.BigEndian.Uint16(b[2*i:]))
		case 9:
			out[i] = float64(binary.BigEndian.Uint32(b[4*i:]))
		case 10:
			out[i] = float64(int64(binary.BigEndian.Uint64(b[8*i:])))
		case 11:
			out[i] = float64(binary.BigEndian.Uint64(b[8*i:]))
		}
	}
	return out
}

func (r *reader) attrs() []attr {
	tag, n := r.u32(), r.count()
	if tag == 0 && n == 0 {
		return nil
	}
	if tag != 0x0C || n > 1<<16 {
		r.err = fmt.Errorf("%w: bad attribute list", ErrFormat)
		return nil
	}
	var out []attr
	for i := int64(0); i < n && r.err == nil; i++ {
		a := attr{name: r.name(), typ: int(r.u32())}
		cnt := r.count()
		sz, ok := typeSize[a.typ]
		if !ok || cnt > int64(len(r.b)) {
			r.err = fmt.Errorf("%w: attribute %q has type %d or %d values", ErrFormat, a.name, a.typ, cnt)
			return nil
		}
		nb := int(cnt) * sz
		pad := (nb + 3) / 4 * 4
		if !r.need(pad) {
			return nil
		}
		if a.typ == 2 {
			a.text = strings.TrimRight(string(r.b[r.p:r.p+nb]), "\x00")
		} else {
			a.values = decode(r.b[r.p:], a.typ, int(cnt))
		}
		r.p += pad
		out = append(out, a)
	}
	return out
}

// parse reads the header and checks every variable's data lies in the file.
func parse(data []byte) (*file, error) {
	if bytes.HasPrefix(data, []byte("\x89HDF\r\n\x1a\n")) {
		return nil, fmt.Errorf("%w: this is NetCDF-4 (HDF5); convert it to classic with the NetCDF tools, for example: nccopy -k cdf5 IN.nc OUT.nc", ErrFormat)
	}
	if len(data) < 4 || string(data[:3]) != "CDF" {
		return nil, fmt.Errorf("%w: not a NetCDF file", ErrFormat)
	}
	v := data[3]
	if v != 1 && v != 2 && v != 5 {
		return nil, fmt.Errorf("%w: unknown NetCDF version %d", ErrFormat, v)
	}
	r := &reader{b: data, p: 4, version: v}
	f := &file{version: v, data: data}
	f.numrecs = r.count()
	if v != 5 && f.numrecs == 0xFFFFFFFF {
		return nil, fmt.Errorf("%w: streaming files (record count unknown) are not supported", ErrFormat)
	}
	tag, n := r.u32(), r.count()
	if !(tag == 0 && n == 0) {
		if tag != 0x0A || n > 1<<16 {
			return nil, fmt.Errorf("%w: bad dimension list", ErrFormat)
		}
		for i := int64(0); i < n && r.err == nil; i++ {
			f.dims = append(f.dims, dim{name: r.name(), length: r.count()})
		}
	}
	gatts := r.attrs()
	_ = gatts
	tag, n = r.u32(), r.count()
	if !(tag == 0 && n == 0) {
		if tag != 0x0B || n > 1<<16 {
			if r.err == nil {
				return nil, fmt.Errorf("%w: bad variable list", ErrFormat)
			}
		}
		for i := int64(0); i < n && r.err == nil; i++ {
			vr := variable{name: r.name()}
			nd := r.count()
			if nd > 64 {
				return nil, fmt.Errorf("%w: variable %q has %d dimensions", ErrFormat, vr.name, nd)
			}
			for j := int64(0); j < nd; j++ {
				id := r.count()
				if id < 0 || id >= int64(len(f.dims)) {
					return nil, fmt.Errorf("%w: variable %q names dimension %d of %d", ErrFormat, vr.name, id, len(f.dims))
				}
				vr.dims = append(vr.dims, int(id))
			}
			vr.attrs = r.attrs()
			vr.typ = int(r.u32())
			if _, ok := typeSize[vr.typ]; !ok && r.err == nil {
				return nil, fmt.Errorf("%w: variable %q has type %d", ErrFormat, vr.name, vr.typ)
			}
			vr.vsize = r.count()
			if v == 1 {
				vr.begin = r.u32()
			} else {
				vr.begin = r.u64()
			}
			vr.record = len(vr.dims) > 0 && f.dims[vr.dims[0]].length == 0
			if vr.record {
				f.recsize += vr.vsize
			}
			f.vars = append(f.vars, vr)
		}
	}
	if r.err != nil {
		return nil, r.err
	}
	// Every variable's data must lie in the file: a truncated file is an
	// error here, whichever slice is asked for.
	for i := range f.vars {
		v := &f.vars[i]
		n := int64(typeSize[v.typ])
		for j, d := range v.dims {
			if v.record && j == 0 {
				continue
			}
			l := f.dimLen(d)
			if l > 0 && n > math.MaxInt64/l {
				return nil, fmt.Errorf("%w: variable %q declares more data than a file can hold", ErrFormat, v.name)
			}
			n *= l
		}
		end := v.begin + n
		if v.record && f.numrecs > 0 {
			end = v.begin + (f.numrecs-1)*f.recsize + n
		}
		if v.begin < 0 || end < v.begin || end > int64(len(data)) {
			return nil, fmt.Errorf("%w: variable %q runs past the end of the file (%d of %d bytes): truncated?", ErrFormat, v.name, end, len(data))
		}
	}
	return f, nil
}

func (f *file) dimLen(id int) int64 {
	if f.dims[id].length == 0 {
		return f.numrecs
	}
	return f.dims[id].length
}

func (v *variable) attr(name string) *attr {
	for i := range v.attrs {
		if v.attrs[i].name == name {
			return &v.attrs[i]
		}
	}
	return nil
}

func (f *file) coordinate(name string) *variable {
	for i := range f.vars {
		v := &f.vars[i]
		if v.name == name && len(v.dims) == 1 && f.dims[v.dims[0]].name == name {
			return v
		}
	}
	return nil
}

// values reads n values of v starting at element offset start (in the
// variable's own order), record variables one record at a time.
func (f *file) values(v *variable, start, n int64) ([]float64, error) {
	sz := int64(typeSize[v.typ])
	if !v.record {
		a := v.begin + start*sz
		if a < 0 || a+n*sz > int64(len(f.data)) {
			return nil, fmt.Errorf("%w: variable %q runs past the end of the file (truncated?)", ErrFormat, v.name)
		}
		return decode(f.data[a:], v.typ, int(n)), nil
	}
	per := int64(1) // elements per record
	for _, d := range v.dims[1:] {
		per *= f.dimLen(d)
	}
	out := make([]float64, 0, n)
	for n > 0 {
		rec, off := start/per, start%per
		take := min(n, per-off)
		a := v.begin + rec*f.recsize + off*sz
		if a < 0 || a+take*sz > int64(len(f.data)) {
			return nil, fmt.Errorf("%w: variable %q runs past the end of the file (truncated?)", ErrFormat, v.name)
		}
		out = append(out, decode(f.data[a:], v.typ, int(take))...)
		start, n = start+take, n-take
	}
	return out, nil
}

// Read decodes a 2-D slice of a NetCDF classic file held in data.
func Read(data []byte, s Settings) (*grid.Field, Info, error) {
	var info Info
	f, err := parse(data)
	if err != nil {
		return nil, info, err
	}
	v, err := f.pick(s.Variable)
	if err != nil {
		return nil, info, err
	}
	info.Variable = v.name
	for _, d := range v.dims {
		info.Dims = append(info.Dims, f.dims[d].name)
	}
	if a := v.attr("units"); a != nil {
		info.Units = a.text
	}
	nd := len(v.dims)
	rows, cols := f.dimLen(v.dims[nd-2]), f.dimLen(v.dims[nd-1])
	if rows < 1 || cols < 1 {
		return nil, info, fmt.Errorf("%w: variable %q is empty (%d x %d)", ErrFormat, v.name, rows, cols)
	}
	if rows*cols > int64(s.Limits.Pixels()) {
		return nil, info, fmt.Errorf("%w: variable %q declares %d x %d values, more than the limit of %d", ErrFormat, v.name, rows, cols, s.Limits.Pixels())
	}
	// The element offset of the chosen plane.
	info.Planes = 1
	var start int64
	stride := rows * cols
	for i := nd - 3; i >= 0; i-- {
		name, length := f.dims[v.dims[i]].name, f.dimLen(v.dims[i])
		info.Planes *= int(length)
		idx, given := s.Index[name]
		if !given {
			if length != 1 && len(s.Index) == 0 && nd > 2 {
				idx = 0 // the first plane when nothing was asked (Planes says how many)
			} else if length != 1 {
				return nil, info, fmt.Errorf("%w: variable %q has %d values along %q: choose one (index %s=I)", ErrFormat, v.name, length, name, name)
			}
		}
		if idx < 0 || int64(idx) >= length {
			return nil, info, fmt.Errorf("%w: index %s=%d outside 0..%d", ErrFormat, name, idx, length-1)
		}
		start += int64(idx) * stride
		stride *= length
	}
	for name := range s.Index {
		found := false
		for _, d := range v.dims[:nd-2] {
			found = found || f.dims[d].name == name
		}
		if !found {
			return nil, info, fmt.Errorf("%w: variable %q has no leading dimension %q (it has %s)", ErrFormat, v.name, name, strings.Join(info.Dims, ", "))
		}
	}
	vals, err := f.values(v, start, rows*cols)
	if err != nil {
		return nil, info, err
	}
	// CF: fill and missing values in the stored type, then scale and offset.
	var fills []float64
	for _, n := range []string{"_FillValue", "missing_value"} {
		if a := v.attr(n); a != nil {
			fills = append(fills, a.values...)
		}
	}
	scale, offset := 1.0, 0.0
	if a := v.attr("scale_factor"); a != nil && len(a.values) > 0 {
		scale = a.values[0]
	}
	if a := v.attr("add_offset"); a != nil && len(a.values) > 0 {
		offset = a.values[0]
	}
	out := grid.New(int(rows), int(cols))
	for i, x := range vals {
		fill := math.IsNaN(x)
		for _, fv := range fills {
			fill = fill || x == fv
		}
		if fill {
			if !s.FillAsZero {
				return nil, info, fmt.Errorf("%w in variable %q at row %d, column %d", ErrFill, v.name, i/int(cols), i%int(cols))
			}
			continue
		}
		out.Data[i] = x*scale + offset
	}
	f.pixelSize(v, out, &info, s.Degrees)
	return out, info, nil
}

// pick returns the variable to read.
func (f *file) pick(name string) (*variable, error) {
	var cands []string
	for i := range f.vars {
		v := &f.vars[i]
		if name != "" && v.name == name {
			if len(v.dims) < 2 {
				return nil, fmt.Errorf("%w: variable %q has %d dimensions, want at least 2", ErrFormat, name, len(v.dims))
			}
			return v, nil
		}
		if len(v.dims) >= 2 {
			cands = append(cands, v.name)
		}
	}
	sort.Strings(cands)
	if name != "" {
		return nil, fmt.Errorf("%w: no variable %q (variables with 2 or more dimensions: %s)", ErrFormat, name, strings.Join(cands, ", "))
	}
	if len(cands) != 1 {
		return nil, fmt.Errorf("%w: %d variables with 2 or more dimensions (%s): choose one by name", ErrFormat, len(cands), strings.Join(cands, ", "))
	}
	return f.pick(cands[0])
}

// pixelSize sets the field's pixel size from evenly spaced coordinate
// variables of its last two dimensions (x the last), with their units.
func (f *file) pixelSize(v *variable, out *grid.Field, info *Info, degrees bool) {
	nd := len(v.dims)
	step := func(d int) (float64, string, []float64, bool) {
		c := f.coordinate(f.dims[v.dims[d]].name)
		if c == nil {
			return 0, "", nil, false
		}
		vals, err := f.values(c, 0, f.dimLen(v.dims[d]))
		if err != nil || len(vals) < 2 {
			return 0, "", nil, false
		}
		h := (vals[len(vals)-1] - vals[0]) / float64(len(vals)-1)
		for i := 1; i < len(vals); i++ {
			if math.Abs(vals[i]-vals[i-1]-h) > 1e-6*math.Abs(h)+1e-12 {
				return 0, "", nil, false
			}
		}
		unit := ""
		if a := c.attr("units"); a != nil {
			unit = a.text
		}
		return math.Abs(h), unit, vals, true
	}
	hx, ux, xs, okx := step(nd - 1)
	hy, uy, ys, oky := step(nd - 2)
	if !okx || !oky {
		info.Note = "no evenly spaced coordinate variables: pixel size 1"
		return
	}
	out.Dx, out.Dy = hx, hy
	out.X0, out.Y0 = xs[0], ys[0]
	info.PixelUnit = ux
	if ux != uy {
		info.Note = fmt.Sprintf("x is in %q, y in %q", ux, uy)
	}
	lon, lat := strings.HasPrefix(ux, "degrees_east") || strings.HasPrefix(ux, "degree_east"), strings.HasPrefix(uy, "degrees_north") || strings.HasPrefix(uy, "degree_north")
	if lon && lat {
		if degrees {
			info.PixelUnit = "degrees"
			info.Note = "latitude-longitude grid: the cost uses degrees, not distances"
		} else {
			// One degree of latitude is about 111.2 km (mean Earth radius
			// 6371 km); a degree of longitude shrinks with the cosine of the
			// latitude, taken at the domain's centre.
			const km = 6371 * math.Pi / 180
			mid := (ys[0] + ys[len(ys)-1]) / 2
			out.Dx, out.Dy = hx*km*math.Cos(mid*math.Pi/180), hy*km
			out.X0, out.Y0 = 0, 0 // no coordinates in km to keep
			info.PixelUnit = "km"
			info.Note = "latitude-longitude degrees converted to km at latitude " + strconv.FormatFloat(mid, 'g', 4, 64)
		}
	}
	out.Unit = info.PixelUnit
	out.PixelSizeSource = "netcdf-coordinates"
	out.PixelSizeNote = info.Note
}

// Planes lists the 2-D slices of the chosen variable: one index map per
// combination of its leading dimensions, slowest first (a stack of
// ensemble members, times or levels, to average as a group).
func Planes(data []byte, s Settings) ([]map[string]int, error) {
	f, err := parse(data)
	if err != nil {
		return nil, err
	}
	v, err := f.pick(s.Variable)
	if err != nil {
		return nil, err
	}
	lead := v.dims[:len(v.dims)-2]
	out := []map[string]int{{}}
	for _, d := range lead {
		name, n := f.dims[d].name, f.dimLen(d)
		if n > 1<<20 {
			return nil, fmt.Errorf("%w: %d planes along %q", ErrFormat, n, name)
		}
		var next []map[string]int
		for _, m := range out {
			for i := int64(0); i < n; i++ {
				c := map[string]int{name: int(i)}
				for k, x := range m {
					c[k] = x
				}
				next = append(next, c)
			}
		}
		out = next
	}
	return out, nil
}
