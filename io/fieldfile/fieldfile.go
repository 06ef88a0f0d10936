package fieldfile

import (
	"barygrid/io/netcdf"
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"image"
	"image/png"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"barygrid/grid"
	"barygrid/io/csvgrid"
	"barygrid/io/imagefile"
	"barygrid/io/npy"
)

// Format names a file family.
type Format string

// Formats recognised by content.
const (
	PNG  Format = "png"
	JPEG Format = "jpeg"
	TIFF Format = "tiff"
	BMP  Format = "bmp"
	GIF  Format = "gif"
	NPY  Format = "npy"
	// NetCDF is a NetCDF classic file (or a NetCDF-4 one, refused with a
	// conversion hint).
	NetCDF Format = "netcdf"
	Text   Format = "csv"
)

var extFormat = map[string]Format{
	".png": PNG, ".jpg": JPEG, ".jpeg": JPEG, ".tif": TIFF, ".tiff": TIFF,
	".bmp": BMP, ".npy": NPY, ".csv": Text, ".tsv": Text, ".txt": Text, ".dat": Text,
	".nc": NetCDF, ".nc4": NetCDF, ".cdf": NetCDF,
}

// Sniff returns the format the content announces, or Text when it has no
// known magic number.
func Sniff(data []byte) Format {
	switch {
	case bytes.HasPrefix(data, []byte("\x89PNG\r\n\x1a\n")):
		return PNG
	case bytes.HasPrefix(data, []byte{0xFF, 0xD8, 0xFF}):
		return JPEG
	case bytes.HasPrefix(data, []byte("II*\x00")), bytes.HasPrefix(data, []byte("MM\x00*")):
		return TIFF
	case bytes.HasPrefix(data, []byte("BM")):
		return BMP
	case bytes.HasPrefix(data, []byte("GIF8")):
		return GIF
	case bytes.HasPrefix(data, []byte("\x93NUMPY")):
		return NPY
	case bytes.HasPrefix(data, []byte("CDF\x01")), bytes.HasPrefix(data, []byte("CDF\x02")), bytes.HasPrefix(data, []byte("CDF\x05")),
		bytes.HasPrefix(data, []byte("\x89HDF\r\n\x1a\n")):
		return NetCDF
	}
	return Text
}

// LoadSettings are the preprocessing steps shared by every command, applied
// in this order: invert, subtract background, set pixel size.
type LoadSettings struct {
	// MaxPixels refuses larger inputs before allocating; zero means 2^28.
	MaxPixels int
	// Invert reads dark objects on a light background (value -> max - value).
	Invert bool
	// Background is subtracted and the result clipped at zero. When
	// BackgroundPercentile is set, the level is that percentile of the field.
	Background           float64
	BackgroundPercentile float64
	// Dx, Dy, Unit override the pixel size; zero keeps the file's own
	// (TIFF resolution tags, OME-XML, GeoTIFF pixel scale), else 1.
	Dx, Dy float64
	Unit   string
	// SkipValidate keeps fields that are not measures (all zero), for
	// masks and inspection.
	SkipValidate bool
	// NetCDF files: the variable, the index along its leading dimensions,
	// fill values read as zero, latitude-longitude kept in degrees (see
	// io/netcdf.Settings).
	Variable   string
	Index      map[string]int
	FillAsZero bool
	Degrees    bool
}

// Load reads the field in path. Errors name the file and the cause.
func Load(path string, s LoadSettings) (*grid.Field, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		var pe *fs.PathError
		if errors.As(err, &pe) {
			return nil, fmt.Errorf("%s: %v", path, pe.Err)
		}
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	f, err := Decode(data, filepath.Ext(path), s)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return f, nil
}

// Decode reads a field from bytes; ext (".png", ...) is checked against the
// content and may be empty.
func Decode(data []byte, ext string, s LoadSettings) (*grid.Field, error) {
	if len(data) == 0 {
		return nil, errors.New("empty file")
	}
	got := Sniff(data)
	want, known := extFormat[strings.ToLower(ext)]
	if known && want != got && !(want == Text && got == Text) {
		return nil, fmt.Errorf("content is not %s (looks like %s)", describe(want), describe(got))
	}
	var (
		f   *grid.Field
		err error
	)
	switch got {
	case NPY:
		f, err = npy.Read(data, npy.ReadSettings{MaxPixels: s.MaxPixels})
	case Text:
		f, err = csvgrid.Read(data, csvgrid.ReadSettings{MaxPixels: s.MaxPixels})
	case NetCDF:
		f, _, err = netcdf.Read(data, netcdf.Settings{Variable: s.Variable, Index: s.Index, FillAsZero: s.FillAsZero,
			Degrees: s.Degrees, Limits: grid.ReadLimits{MaxPixels: s.MaxPixels}})
	default:
		f, err = imagefile.Read(data, imagefile.ReadSettings{MaxPixels: s.MaxPixels})
	}
	if err != nil {
		return nil, err
	}
	return Prepare(f, s)
}

func describe(f Format) string {
	switch f {
	case Text:
		return "a text grid"
	case NPY:
		return "a NumPy array"
	case NetCDF:
		return "a NetCDF file"
	}
	return "a " + strings.ToUpper(string(f)) + " image"
}

// Prepare applies the shared preprocessing to a decoded field and checks
// that the result is a measure.
func Prepare(f *grid.Field, s LoadSettings) (*grid.Field, error) {
	if s.Invert {
		f = grid.Invert(f)
	}
	if s.BackgroundPercentile > 0 {
		f = grid.SubtractBackground(f, grid.Percentile(f, s.BackgroundPercentile))
	} else if s.Background != 0 {
		f = grid.SubtractBackground(f, s.Background)
	}
	if s.Dx > 0 {
		f.Dx = s.Dx
		f.PixelSizeSource = "flag"
	} else if f.PixelSizeSource == "" {
		f.PixelSizeSource = "default"
	}
	if s.Dy > 0 {
		f.Dy = s.Dy
	} else if s.Dx > 0 {
		f.Dy = s.Dx
	}
	if s.Unit != "" || s.Dx > 0 {
		f.Unit = s.Unit // the user's pixel size comes with the user's unit
	}
	if s.SkipValidate {
		return f, nil
	}
	if err := f.Validate(); err != nil {
		return nil, err
	}
	return f, nil
}

// SaveSettings choose how Save writes.
type SaveSettings struct {
	// Force replaces an existing file.
	Force bool
	// EightBit writes 8-bit PNG/TIFF samples instead of 16-bit.
	EightBit bool
}

// SaveImage writes a picture (a colour rendering, a sheet) as PNG,
// atomically, never replacing an existing file unless force.
func SaveImage(path string, im image.Image, force bool) error {
	return WriteAtomic(path, force, func(w io.Writer) error { return png.Encode(w, im) })
}

// Save writes f to path in the format its extension names (.npy exact
// float64, .csv, .png 16-bit gray, .tif 16-bit). It returns a description of
// the value scaling for image formats ("" for exact formats).
func Save(path string, f *grid.Field, s SaveSettings) (string, error) {
	ext := strings.ToLower(filepath.Ext(path))
	var (
		scaling string
		enc     func(io.Writer) error
	)
	ws := imagefile.WriteSettings{EightBit: s.EightBit}
	switch ext {
	case ".npy":
		enc = func(w io.Writer) error { return npy.Write(w, f) }
	case ".csv", ".txt":
		enc = func(w io.Writer) error { return csvgrid.Write(w, f) }
	case ".nc":
		enc = func(w io.Writer) error { return netcdf.Write(w, f, netcdf.WriteSettings{X0: f.X0, Y0: f.Y0}) }
	case ".png":
		enc = func(w io.Writer) error {
			sc, err := imagefile.WritePNG(w, f, ws)
			scaling = sc.String()
			return err
		}
	case ".tif", ".tiff":
		enc = func(w io.Writer) error {
			sc, err := imagefile.WriteTIFF(w, f, ws)
			scaling = sc.String()
			return err
		}
	default:
		return "", fmt.Errorf("%s: unknown output format %q (use .npy, .csv, .png, .tif or .nc)", path, ext)
	}
	if err := WriteAtomic(path, s.Force, enc); err != nil {
		return "", err
	}
	return scaling, nil
}

// ErrExists is returned when an output exists and Force is not set.
var ErrExists = errors.New("file exists and replacing it was not asked for")

// WriteAtomic writes through a temporary file in the target's folder and
// renames it into place, so a crash or an error never leaves a partial file
// and readers see either the old or the new content. Without force an
// existing file is kept and ErrExists returned.
func WriteAtomic(path string, force bool, write func(io.Writer) error) error {
	if !force {
		if _, err := os.Lstat(path); err == nil {
			return fmt.Errorf("%s: %w", path, ErrExists)
		}
	}
	dir := filepath.Dir(path)
	tmp, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp*")
	if err != nil {
		return fmt.Errorf("%s: %v", path, unwrapPath(err))
	}
	name := tmp.Name()
	fail := func(err error) error {
		tmp.Close()
		os.Remove(name)
		return fmt.Errorf("%s: %v", path, unwrapPath(err))
	}
	// Buffered: some encoders write a value at a time (the NPY one took
	// 38 ms for 128^2 in 131,072 system calls).
	bw := bufio.NewWriterSize(tmp, 1<<16)
	if err := write(bw); err != nil {
		return fail(err)
	}
	if err := bw.Flush(); err != nil {
		return fail(err)
	}
	if err := tmp.Sync(); err != nil {
		return fail(err)
	}
	if err := tmp.Close(); err != nil {
		os.Remove(name)
		return fmt.Errorf("%s: %v", path, unwrapPath(err))
	}
	if err := os.Chmod(name, 0o644); err != nil {
		os.Remove(name)
		return fmt.Errorf("%s: %v", path, unwrapPath(err))
	}
	if !force {
		// Link fails if the target appeared meanwhile: no clobbering race.
		if err := os.Link(name, path); err != nil {
			os.Remove(name)
			if errors.Is(err, fs.ErrExist) {
				return fmt.Errorf("%s: %w", path, ErrExists)
			}
			return fmt.Errorf("%s: %v", path, unwrapPath(err))
		}
		os.Remove(name)
		return nil
	}
	if err := os.Rename(name, path); err != nil {
		os.Remove(name)
		return fmt.Errorf("%s: %v", path, unwrapPath(err))
	}
	return nil
}

func unwrapPath(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	var le *os.LinkError
	if errors.As(err, &le) {
		return le.Err
	}
	return err
}

// LoadPlanes reads every 2-D plane of a file: the planes of a NetCDF
// variable's leading dimensions when Index fixes none of them (a stack to
// average as a group), else the one field Load reads. Labels name the
// planes ("file.nc[member=3]").
func LoadPlanes(path string, s LoadSettings) ([]*grid.Field, []string, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		var pe *fs.PathError
		if errors.As(err, &pe) {
			return nil, nil, fmt.Errorf("%s: %v", path, pe.Err)
		}
		return nil, nil, fmt.Errorf("%s: %w", path, err)
	}
	if Sniff(data) == TIFF {
		// A multi-page TIFF (z-stack, time series) is a stack of pages,
		// unless Index picks one ("page").
		n := imagefile.TIFFPages(data)
		if p, ok := s.Index["page"]; ok || n > 1 {
			pages := []int{p}
			if !ok {
				pages = pages[:0]
				for i := 0; i < n; i++ {
					pages = append(pages, i)
				}
			}
			var fs []*grid.Field
			var labels []string
			for _, i := range pages {
				f, err := imagefile.ReadPage(data, i, imagefile.ReadSettings{MaxPixels: s.MaxPixels})
				if err == nil {
					f, err = Prepare(f, s)
				}
				if err != nil {
					return nil, nil, fmt.Errorf("%s[page=%d]: %w", path, i, err)
				}
				fs, labels = append(fs, f), append(labels, fmt.Sprintf("%s[page=%d]", path, i))
			}
			return fs, labels, nil
		}
	}
	if Sniff(data) != NetCDF || len(s.Index) > 0 {
		f, err := Decode(data, filepath.Ext(path), s)
		if err != nil {
			return nil, nil, fmt.Errorf("%s: %w", path, err)
		}
		return []*grid.Field{f}, []string{path}, nil
	}
	planes, err := netcdf.Planes(data, netcdf.Settings{Variable: s.Variable})
	if err != nil {
		return nil, nil, fmt.Errorf("%s: %w", path, err)
	}
	var fs []*grid.Field
	var labels []string
	for _, idx := range planes {
		ps := s
		ps.Index = idx
		f, err := Decode(data, filepath.Ext(path), ps)
		if err != nil {
			return nil, nil, fmt.Errorf("%s%s: %w", path, label(idx), err)
		}
		fs, labels = append(fs, f), append(labels, path+label(idx))
	}
	return fs, labels, nil
}

func label(idx map[string]int) string {
	if len(idx) == 0 {
		return ""
	}
	var parts []string
	for k, v := range idx {
		parts = append(parts, fmt.Sprintf("%s=%d", k, v))
	}
	sort.Strings(parts)
	return "[" + strings.Join(parts, ",") + "]"
}
