package main

import (
	"barygrid/io/imagefile"
	"barygrid/render"
	"fmt"
	"image"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"

	"barygrid/grid"
	"barygrid/io/fieldfile"

	"github.com/urfave/cli/v2"
)

// inputFlags are the preprocessing options every command that reads fields
// shares.
func inputFlags() []cli.Flag {
	return []cli.Flag{
		&cli.StringFlag{Name: "pixel-size", Usage: "physical pixel size `DX[,DY]` (default 1)"},
		&cli.StringFlag{Name: "unit", Usage: "name of the physical unit of the pixel size (um, km, ...)"},
		&cli.BoolFlag{Name: "invert", Usage: "read dark objects on a light background (value -> max - value)"},
		&cli.StringFlag{Name: "background", Usage: "subtract a constant `LEVEL`, or a percentile written pNN (p10), and clip at zero"},
		&cli.IntFlag{Name: "max-pixels", Value: 1 << 28, Usage: "refuse inputs declaring more pixels than this, before reading them"},
		&cli.StringFlag{Name: "variable", Usage: "NetCDF: read variable `NAME` (default: the only one with two or more dimensions)"},
		&cli.StringFlag{Name: "index", Usage: "NetCDF: take the 2-D slice at `DIM=I[,DIM=I]` along the variable's leading dimensions (time=3,member=0; default 0 where a dimension has length 1)"},
		&cli.BoolFlag{Name: "fill-zero", Usage: "NetCDF: read fill and missing values (_FillValue, missing_value) as zero instead of refusing the file"},
		&cli.BoolFlag{Name: "degrees", Usage: "NetCDF: keep latitude-longitude coordinates in degrees (default: km at the domain's centre latitude)"},
		&cli.StringFlag{Name: "resample", Usage: "resample every input to `ROWSxCOLS`, rows first (128x96: 128 rows high, 96 columns wide), keeping the physical extent; off: differing shapes are an error"},
	}
}

func outputFlags() []cli.Flag {
	return []cli.Flag{
		&cli.BoolFlag{Name: "force", Usage: "replace existing output files"},
		&cli.BoolFlag{Name: "eight-bit", Usage: "write 8-bit instead of 16-bit PNG and TIFF samples"},
		&cli.BoolFlag{Name: "color", Usage: "write PNG output as a colour picture (barygrid's own colour map, Lagoon: dark navy through teal and green to cream; brighter is more)"},
	}
}

func loadSettings(c *cli.Context) (fieldfile.LoadSettings, error) {
	s := fieldfile.LoadSettings{MaxPixels: c.Int("max-pixels"), Invert: c.Bool("invert"), Unit: c.String("unit"),
		Variable: c.String("variable"), FillAsZero: c.Bool("fill-zero"), Degrees: c.Bool("degrees")}
	if v := c.String("index"); v != "" {
		s.Index = map[string]int{}
		for _, part := range strings.Split(v, ",") {
			name, num, ok := strings.Cut(part, "=")
			i, err := strconv.Atoi(strings.TrimSpace(num))
			if !ok || name == "" || err != nil || i < 0 {
				return s, usagef("--index: want DIM=I[,DIM=I] with I >= 0, got %q", v)
			}
			s.Index[strings.TrimSpace(name)] = i
		}
	}
	if v := c.String("pixel-size"); v != "" {
		xs, err := parseFloats(v)
		if err != nil || len(xs) > 2 || len(xs) == 0 || !(xs[0] > 0) || (len(xs) == 2 && !(xs[1] > 0)) {
			return s, usagef("--pixel-size: want DX or DX,DY with positive numbers, got %q", v)
		}
		s.Dx, s.Dy = xs[0], xs[0]
		if len(xs) == 2 {
			s.Dy = xs[1]
		}
	}
	if v := c.String("background"); v != "" {
		if strings.HasPrefix(v, "p") {
			p, err := strconv.ParseFloat(v[1:], 64)
			if err != nil || !(p > 0 && p <= 100) {
				return s, usagef("--background: percentile must be p0..p100, got %q", v)
			}
			s.BackgroundPercentile = p
		} else {
			b, err := strconv.ParseFloat(v, 64)
			if err != nil || math.IsNaN(b) || math.IsInf(b, 0) {
				return s, usagef("--background: want a number or pNN, got %q", v)
			}
			s.Background = b
		}
	}
	return s, nil
}

func parseFloats(v string) ([]float64, error) {
	var out []float64
	for _, p := range strings.Split(v, ",") {
		x, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
			return nil, fmt.Errorf("%q is not a number", p)
		}
		out = append(out, x)
	}
	return out, nil
}

// loadFields reads every file, applies the shared preprocessing and checks
// that shapes agree (or resamples when asked).
//
// A NetCDF file whose variable has leading dimensions (ensemble members,
// times) and no --index is a stack: each plane is an input, labelled
// FILE[DIM=I]; the returned labels name every input.
func loadFields(c *cli.Context, files []string) ([]*grid.Field, []string, error) {
	if len(files) == 0 {
		return nil, nil, usagef("%s: no input files", c.Command.Name)
	}
	s, err := loadSettings(c)
	if err != nil {
		return nil, nil, err
	}
	var fs []*grid.Field
	var labels []string
	for _, p := range files {
		planes, names, err := fieldfile.LoadPlanes(p, s)
		if err != nil {
			return nil, nil, err
		}
		fs, labels = append(fs, planes...), append(labels, names...)
	}
	files = labels
	shape, err := parseResample(c.String("resample"))
	if err != nil {
		return nil, nil, err
	}
	if err := resampleAll(fs, files, shape); err != nil {
		return nil, nil, err
	}
	if err := grid.SameShape(fs, files); err != nil {
		return nil, nil, fmt.Errorf("%v (use --resample ROWSxCOLS)", err)
	}
	for i, f := range fs {
		if f.Unit == "degrees" {
			// Said plainly, once: distances in degrees are not distances.
			fmt.Fprintf(os.Stderr, "note: %s: latitude-longitude grid kept in degrees (--degrees): the transport cost uses degrees, not km\n", labels[i])
			break
		}
		if f.PixelSizeNote != "" && f.PixelSizeSource == "netcdf-coordinates" {
			hint := ""
			if strings.Contains(f.PixelSizeNote, "converted to km") {
				hint = " (--degrees keeps degrees)"
			}
			fmt.Fprintf(os.Stderr, "note: %s: %s%s\n", labels[i], f.PixelSizeNote, hint)
			break
		}
	}
	return fs, labels, nil
}

// parseResample reads --resample ROWSxCOLS; "" is off (zero shape).
func parseResample(v string) ([2]int, error) {
	if v == "" {
		return [2]int{}, nil
	}
	var rows, cols int
	if _, err := fmt.Sscanf(v, "%dx%d", &rows, &cols); err != nil || rows < 2 || cols < 2 {
		return [2]int{}, usagef("--resample: want ROWSxCOLS, got %q", v)
	}
	return [2]int{rows, cols}, nil
}

// resampleAll resamples every field to shape in place (a zero shape: off).
func resampleAll(fs []*grid.Field, files []string, shape [2]int) error {
	if shape[0] == 0 {
		return nil
	}
	for i, f := range fs {
		g, err := grid.Resample(f, shape[0], shape[1])
		if err != nil {
			return fmt.Errorf("%s: %w", files[i], err)
		}
		fs[i] = g
	}
	return nil
}

// saveField writes f by its extension; with --color a .png goes through
// the colour map. It returns the description of the value scaling.
func saveField(c *cli.Context, path string, f *grid.Field) (string, error) {
	return saveFieldAs(path, f, c.Bool("color"), fieldfile.SaveSettings{Force: c.Bool("force"), EightBit: c.Bool("eight-bit")})
}

func saveFieldAs(path string, f *grid.Field, color bool, s fieldfile.SaveSettings) (string, error) {
	if color && strings.EqualFold(filepath.Ext(path), ".png") {
		im, sc := render.Colorize(f, imagefile.WriteSettings{})
		return sc.String() + ", colour map Lagoon", fieldfile.SaveImage(path, im, s.Force)
	}
	return fieldfile.Save(path, f, s)
}

// writeJSON writes v as indented JSON atomically.

// checkOutputs refuses before any work when an output exists without --force.
func checkOutputs(force bool, paths ...string) error {
	if force {
		return nil
	}
	for _, p := range paths {
		if p == "" {
			continue
		}
		if _, err := os.Lstat(p); err == nil {
			return fmt.Errorf("%s: %w", p, fieldfile.ErrExists)
		}
	}
	return nil
}

func isTerminal(f *os.File) bool {
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

func parseWeights(v string, n int) ([]float64, error) {
	if v == "" {
		return nil, nil
	}
	w, err := parseFloats(v)
	if err != nil {
		return nil, usagef("--weights: %v", err)
	}
	if len(w) != n {
		return nil, usagef("--weights: %d weights for %d inputs", len(w), n)
	}
	for _, x := range w {
		if x < 0 {
			return nil, usagef("--weights: weights must be non-negative, got %g", x)
		}
	}
	return w, nil
}

type imageNRGBA = image.NRGBA

func numCPU() int { return runtime.GOMAXPROCS(0) }
