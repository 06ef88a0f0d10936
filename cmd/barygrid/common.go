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
	s := fieldfile.LoadSettings{MaxPixels: c.Int("max-pixels"), Invert: c.Bool("invert"), Unit: c.String("unit")}
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
func loadFields(c *cli.Context, files []string) ([]*grid.Field, error) {
	if len(files) == 0 {
		return nil, usagef("%s: no input files", c.Command.Name)
	}
	s, err := loadSettings(c)
	if err != nil {
		return nil, err
	}
	var fs []*grid.Field
	for _, p := range files {
		f, err := fieldfile.Load(p, s)
		if err != nil {
			return nil, err
		}
		fs = append(fs, f)
	}
	shape, err := parseResample(c.String("resample"))
	if err != nil {
		return nil, err
	}
	if err := resampleAll(fs, files, shape); err != nil {
		return nil, err
	}
	if err := grid.SameShape(fs, files); err != nil {
		return nil, fmt.Errorf("%v (use --resample ROWSxCOLS)", err)
	}
	return fs, nil
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
