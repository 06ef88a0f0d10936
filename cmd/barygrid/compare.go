package main

import (
	"barygrid/ensemble"
	"barygrid/render"
	"barygrid/report"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"image/gif"
	"io"
	"os"
	"path/filepath"
	"strconv"

	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/sinkhorn"

	"github.com/urfave/cli/v2"
)

func morphCommand() *cli.Command {
	flags := append(inputFlags(), solverFlags()...)
	flags = append(flags, outputFlags()...)
	flags = append(flags,
		&cli.IntFlag{Name: "frames", Value: 9, Usage: "number of frames, t from 0 to 1"},
		&cli.StringFlag{Name: "out", Usage: "folder for numbered frames"},
		&cli.StringFlag{Name: "format", Value: "png", Usage: "frame format: png, npy or tif"},
		&cli.StringFlag{Name: "gif", Usage: "write an animated GIF to `FILE`"},
		&cli.BoolFlag{Name: "gauss", Usage: "interpolate the fitted Gaussians along the Bures-Wasserstein geodesic instead"},
	)
	return withUsage(&cli.Command{
		Name:      "morph",
		Usage:     "displacement interpolation between two fields (weighted barycenters)",
		ArgsUsage: "A B",
		Flags:     flags,
		Action: func(c *cli.Context) error {
			if c.NArg() != 2 {
				return usagef("morph: want two fields, got %d", c.NArg())
			}
			n := c.Int("frames")
			if n < 2 || n > 1000 {
				return usagef("--frames must be between 2 and 1000, got %d", n)
			}
			format := c.String("format")
			if format != "png" && format != "npy" && format != "tif" {
				return usagef("--format: want png, npy or tif, got %q", format)
			}
			dir, gifPath := c.String("out"), c.String("gif")
			if dir == "" && gifPath == "" {
				return usagef("morph: give --out DIR or --gif FILE")
			}
			if err := checkOutputs(c.Bool("force"), gifPath); err != nil {
				return err
			}
			s, err := solverSettings(c)
			if err != nil {
				return err
			}
			fs, _, err := loadFields(c, c.Args().Slice())
			if err != nil {
				return err
			}
			mr, err := ensemble.Morph(fs[0], fs[1], ensemble.MorphSettings{Frames: n, Gaussian: c.Bool("gauss"), Solver: s})
			if err != nil {
				return maskError(c, err)
			}
			frames, iters := mr.Frames, mr.Iterations
			if dir != "" {
				if err := os.MkdirAll(dir, 0o755); err != nil {
					return fmt.Errorf("%s: %v", dir, err)
				}
				for i, f := range frames {
					p := filepath.Join(dir, fmt.Sprintf("frame_%03d.%s", i, format))
					if _, err := saveField(c, p, f); err != nil {
						return err
					}
				}
			}
			if gifPath != "" {
				if err := writeGIF(gifPath, c.Bool("force"), frames); err != nil {
					return err
				}
			}
			fmt.Printf("morph: %d frames (%s), %d iterations in all\n", n, map[bool]string{true: "Bures-Wasserstein geodesic", false: "entropic barycenters, warm-started"}[c.Bool("gauss")], iters)
			return nil
		},
	})
}

// writeGIF writes the frames as an animation on one common scale.
func writeGIF(path string, force bool, frames []*grid.Field) error {
	anim := render.Animation(frames, 12)
	return fieldfile.WriteAtomic(path, force, func(w io.Writer) error { return gif.EncodeAll(w, anim) })
}

func distanceCommand() *cli.Command {
	flags := append(inputFlags(), solverFlags()...)
	flags = append(flags,
		&cli.BoolFlag{Name: "json", Usage: "print a JSON object with the settings"},
		&cli.BoolFlag{Name: "gauss", Usage: "closed-form W2^2 between the fields' fitted Gaussians"},
		&cli.BoolFlag{Name: "matrix", Usage: "pairwise matrix of all inputs (needs --out)"},
		&cli.StringFlag{Name: "out", Usage: "CSV file for --matrix"},
		&cli.BoolFlag{Name: "force", Usage: "replace an existing --out file"},
	)
	return withUsage(&cli.Command{
		Name:      "distance",
		Usage:     "Sinkhorn divergence (or Gaussian W2^2) between fields",
		ArgsUsage: "A B | --matrix --out M.csv FILE...",
		Flags:     flags,
		Action: func(c *cli.Context) error {
			files := c.Args().Slice()
			matrix := c.Bool("matrix")
			if matrix && (c.String("out") == "" || len(files) < 2) {
				return usagef("distance --matrix: want --out M.csv and at least two files")
			}
			if !matrix && len(files) != 2 {
				return usagef("distance: want two fields, got %d", len(files))
			}
			if err := checkOutputs(c.Bool("force"), c.String("out")); err != nil {
				return err
			}
			s, err := solverSettings(c)
			if err != nil {
				return err
			}
			s.Progress = nil
			if s.Mask != nil {
				return usagef("distance: --mask is not supported for divergences")
			}
			fs, labels, err := loadFields(c, files)
			if err != nil {
				return err
			}
			files = labels // a NetCDF stack's planes are inputs of their own
			ds := ensemble.DistanceSettings{Solver: s}
			switch {
			case c.Bool("gauss"):
				ds.Kind = ensemble.GaussianW2
			case s.Unbalanced > 0:
				ds.Kind = ensemble.UnbalancedDivergence
			}
			if !matrix {
				d, err := ensemble.Between(fs[0], fs[1], ds)
				if err != nil {
					return err
				}
				if c.Bool("json") {
					return json.NewEncoder(os.Stdout).Encode(report.NewDistance(files[0], files[1], fs[0].Unit, d, s))
				}
				fmt.Printf("%.10g\n", d.Value)
				return nil
			}
			m, err := ensemble.Matrix(fs, ds)
			if err != nil {
				return err
			}
			n := len(fs)
			err = fieldfile.WriteAtomic(c.String("out"), c.Bool("force"), func(w io.Writer) error {
				cw := csv.NewWriter(w)
				cw.Write(append([]string{"file"}, files...))
				for i, row := range m {
					rec := []string{files[i]}
					for _, v := range row {
						rec = append(rec, strconv.FormatFloat(v, 'g', 10, 64))
					}
					cw.Write(rec)
				}
				cw.Flush()
				return cw.Error()
			})
			if err != nil {
				return err
			}
			fmt.Printf("wrote the %d x %d distance matrix to %s\n", n, n, c.String("out"))
			return nil
		},
	})
}

// rankInputs ranks the inputs by their Sinkhorn divergence to the
// barycenter, outliers flagged (ensemble.RankInputs).
func rankInputs(files []string, fs []*grid.Field, bary *grid.Field, s sinkhorn.Settings) ([]report.Rank, error) {
	rs, err := ensemble.RankInputs(fs, bary, ensemble.DistanceSettings{Solver: s})
	if err != nil {
		return nil, err
	}
	out := make([]report.Rank, len(rs))
	for i, r := range rs {
		out[i] = report.Rank{File: files[r.Index], Divergence: r.Divergence, Score: r.Score, Outlier: r.Outlier}
	}
	return out, nil
}
