package main

import (
	"barygrid/ensemble"
	"barygrid/internal/parallel"
	"barygrid/io/gaussfile"
	"barygrid/render"
	"barygrid/report"
	"fmt"
	"gonum.org/v1/gonum/mat"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"

	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/io/imagefile"

	"github.com/urfave/cli/v2"
)

func unwrapErr(err error) error {
	if pe, ok := err.(*os.PathError); ok {
		return pe.Err
	}
	return err
}

func gaussCommand() *cli.Command {
	flags := append(inputFlags(), outputFlags()...)
	flags = append(flags,
		&cli.StringFlag{Name: "algorithm", Value: "fixed-point", Usage: "how to find the average: fixed-point (the classical iteration), gradient-descent (steps of --step-size), or sampled (stochastic gradient descent: passes over the fits in random order, for very many fits)"},
		&cli.StringFlag{Name: "weights", Usage: "comma-separated weights, one per input"},
		&cli.Float64Flag{Name: "tol", Value: 1e-10, Usage: "fixed-point and gradient-descent stop when the averaged map differs from the identity by less than this (gradient norm)"},
		&cli.IntFlag{Name: "max-iter", DefaultText: "1000", Usage: "iteration cap of fixed-point and gradient-descent"},
		&cli.Float64Flag{Name: "step-size", DefaultText: "1", Usage: "step of gradient-descent; for sampled, the first step (later ones shrink as its value / sqrt(t))"},
		&cli.IntFlag{Name: "passes", DefaultText: "10", Usage: "sampled: passes over the fits"},
		&cli.IntFlag{Name: "fits-per-step", DefaultText: "1", Usage: "sampled: fits drawn per step"},
		&cli.Uint64Flag{Name: "seed", Value: 1, Usage: "sampled: random seed (the same seed gives the same result)"},
		&cli.StringFlag{Name: "stream", Usage: "read fits from `FILE` (- for standard input) as JSON lines, one {\"mean\": [...], \"cov\": [[...]], \"weight\": w} per line, in constant memory with --algorithm sampled (--passes reads the file again; default one pass), or all in memory with the other algorithms"},
		&cli.BoolFlag{Name: "pixel-correction", Usage: "remove each pixel's own spread from the fitted covariances (dx^2/12 per axis, Sheppard's correction)"},
		&cli.StringFlag{Name: "out", Usage: "render the barycenter Gaussian on the inputs' grid to `FILE`"},
		&cli.StringFlag{Name: "params", Usage: "write the barycenter parameters and solver figures to `FILE.json`"},
		&cli.StringFlag{Name: "sheet", Usage: "write a contact sheet PNG (inputs, pixel mean, rendered Gaussian barycenter, ellipses) to `FILE`"},
		&cli.StringFlag{Name: "overlay", Usage: "write a PNG of every input's one-sigma ellipse and the barycenter's (thick) over the pixel mean to `FILE`"},
	)
	return withUsage(&cli.Command{
		Name:      "gauss",
		Usage:     "fit each field with a Gaussian and average the fits (Bures-Wasserstein barycenter)",
		ArgsUsage: "FILE... (fields, or .json files of Gaussians)",
		Flags:     flags,
		Action: func(c *cli.Context) error {
			files := c.Args().Slice()
			if c.String("stream") != "" {
				if len(files) > 0 {
					return usagef("gauss: give FILE... or --stream, not both")
				}
				return gaussStream(c)
			}
			if len(files) == 0 {
				return usagef("gauss: no input files")
			}
			out, params := c.String("out"), c.String("params")
			overlay := c.String("overlay")
			sheetPath := c.String("sheet")
			if err := checkOutputs(c.Bool("force"), out, params, overlay, sheetPath); err != nil {
				return err
			}
			s := gaussfit.Settings{Tol: c.Float64("tol"), MaxIter: c.Int("max-iter"), Step: c.Float64("step-size"),
				Passes: c.Int("passes"), FitsPerStep: c.Int("fits-per-step"), Seed: c.Uint64("seed")}
			switch c.String("algorithm") {
			case "fixed-point":
				s.Solver = gaussfit.FixedPoint
			case "gradient-descent":
				s.Solver = gaussfit.Gradient
			case "sampled":
				s.Solver = gaussfit.Stochastic
			default:
				return usagef("--algorithm: want fixed-point, gradient-descent or sampled, got %q", c.String("algorithm"))
			}
			var (
				gs     []gaussfit.Gaussian
				ws     []float64
				ref    *grid.Field
				mass   float64
				nfld   int
				fields []string
				refs   []*grid.Field
			)
			for _, p := range files {
				if strings.EqualFold(filepath.Ext(p), ".json") {
					g, w, err := gaussfile.ReadFile(p)
					if err != nil {
						return err
					}
					gs, ws = append(gs, g...), append(ws, w...)
				} else {
					fields = append(fields, p)
				}
			}
			if len(fields) > 0 {
				fs, err := loadFieldsParallel(c, fields)
				if err != nil {
					return err
				}
				for i, f := range fs {
					g, m, err := gaussfit.Fit(f, gaussfit.FitSettings{Sheppard: c.Bool("pixel-correction")})
					if err != nil {
						return fmt.Errorf("%s: %w", fields[i], err)
					}
					gs, ws = append(gs, g), append(ws, 1)
					mass += m
					nfld++
				}
				ref = fs[0]
				if err := grid.SameShape(fs, fields); err != nil && overlay != "" {
					return fmt.Errorf("--overlay needs fields of one shape: %v", err)
				}
				refs = fs
			}
			for i, g := range gs {
				if len(g.Mean) != len(gs[0].Mean) {
					return fmt.Errorf("gauss: input %d has dimension %d, input 1 has %d", i+1, len(g.Mean), len(gs[0].Mean))
				}
			}
			if v := c.String("weights"); v != "" {
				w, err := parseWeights(v, len(gs))
				if err != nil {
					return err
				}
				ws = w
			}
			s.Weights = ws
			r, err := gaussfit.Barycenter(gs, s)
			if err != nil {
				return err
			}
			b := r.Barycenter
			p := report.NewGaussian(r, s.Solver.String(), len(gs))
			if ref != nil {
				p.MeanMass, p.Unit = mass/float64(nfld), ref.Unit
			}
			if out != "" {
				if ref == nil || len(b.Mean) != 2 {
					return usagef("--out needs field inputs (2-D) to know the grid")
				}
				dx, dy := ref.PixelSize()
				f := gaussfit.Render(b, ref.Rows, ref.Cols, dx, dy, p.MeanMass)
				f.Unit = ref.Unit
				if _, err := saveField(c, out, f); err != nil {
					return err
				}
			}
			if overlay != "" {
				if ref == nil || len(b.Mean) != 2 {
					return usagef("--overlay needs field inputs (2-D)")
				}
				dx, dy := ref.PixelSize()
				mean, err := ensemble.PixelMean(refs)
				if err != nil {
					return err
				}
				bg, _ := render.Colorize(mean, imagefile.WriteSettings{})
				zoom := max(1, 512/max(ref.Rows, ref.Cols))
				im := render.Ellipses(bg, dx, dy, zoom, gs[len(gs)-nfld:], b)
				if err := fieldfile.WriteAtomic(overlay, c.Bool("force"), func(w io.Writer) error { return png.Encode(w, im) }); err != nil {
					return err
				}
			}
			if sheetPath != "" {
				if len(refs) == 0 || grid.SameShape(refs, fields) != nil {
					return usagef("--sheet needs field inputs of one shape")
				}
				if err := writeSheet(sheetPath, c.Bool("force"), "Gaussian barycenter", fields, refs, nil); err != nil {
					return err
				}
			}
			if params != "" {
				if err := report.WriteJSON(params, c.Bool("force"), p); err != nil {
					return err
				}
			}
			fmt.Printf("Gaussian barycenter of %d inputs (%s): %d iterations, gradient norm %.2g\n", len(gs), p.Solver, r.Iterations, r.GradNorm)
			fmt.Printf("  mean %s\n  covariance %s\n", fmtVec(b.Mean), fmtMat(p.Covariance))
			return nil
		},
	})
}

func fmtVec(v []float64) string {
	parts := make([]string, len(v))
	for i, x := range v {
		parts[i] = fmt.Sprintf("%.6g", x)
	}
	return "[" + strings.Join(parts, ", ") + "]"
}

func fmtMat(m [][]float64) string {
	parts := make([]string, len(m))
	for i, r := range m {
		parts[i] = fmtVec(r)
	}
	return "[" + strings.Join(parts, ", ") + "]"
}

// loadFieldsParallel decodes files on all CPUs (decoding dominates fits of
// many fields); shapes may differ, since each field is fitted on its own.
func loadFieldsParallel(c *cli.Context, files []string) ([]*grid.Field, error) {
	s, err := loadSettings(c)
	if err != nil {
		return nil, err
	}
	fs := make([]*grid.Field, len(files))
	errs := make([]error, len(files))
	parallel.For(len(files), 0, func(i int) {
		fs[i], errs[i] = fieldfile.Load(files[i], s)
	})
	for _, e := range errs {
		if e != nil {
			return nil, e
		}
	}
	return fs, nil
}

// gaussStream averages the fits of --stream.
func gaussStream(c *cli.Context) error {
	path, params := c.String("stream"), c.String("params")
	if err := checkOutputs(c.Bool("force"), params); err != nil {
		return err
	}
	open := func() (gaussfit.Source, error) {
		if path == "-" {
			return gaussfile.NewLineSource(os.Stdin, "standard input"), nil
		}
		f, err := os.Open(path)
		if err != nil {
			return nil, fmt.Errorf("%s: %v", path, unwrapErr(err))
		}
		// Closed when the process ends; a pass reads it to the end.
		return gaussfile.NewLineSource(f, path), nil
	}
	var p report.Gaussian
	switch alg := c.String("algorithm"); alg {
	case "sampled":
		passes := c.Int("passes")
		if passes == 0 {
			passes = 1
		}
		if path == "-" && passes > 1 {
			return usagef("--stream -: standard input can be read once; give a file for --passes %d", passes)
		}
		r, err := gaussfit.Stream(open, gaussfit.StreamSettings{Passes: passes, Step: c.Float64("step-size")})
		if err != nil {
			return err
		}
		p = report.Gaussian{Mean: r.Barycenter.Mean, Covariance: report.Rows(r.Barycenter.Cov), Solver: "sampled (streamed)",
			Iterations: r.Fits * r.Passes, Converged: true, Seconds: r.Elapsed.Seconds(), Inputs: r.Fits, Objective: []float64{r.Objective}}
	case "fixed-point", "gradient-descent":
		src, err := open()
		if err != nil {
			return err
		}
		gs, ws, err := gaussfile.ReadAll(src)
		if err != nil {
			return err
		}
		s := gaussfit.Settings{Solver: gaussfit.FixedPoint, Weights: ws, Tol: c.Float64("tol"), MaxIter: c.Int("max-iter"), Step: c.Float64("step-size")}
		if alg == "gradient-descent" {
			s.Solver = gaussfit.Gradient
		}
		r, err := gaussfit.Barycenter(gs, s)
		if err != nil {
			return err
		}
		p = report.NewGaussian(r, alg, len(gs))
		var ob float64
		var wsum float64
		for i, g := range gs {
			ob += ws[i] * gaussfit.W2Sq(g, r.Barycenter)
			wsum += ws[i]
		}
		p.Objective = []float64{ob / wsum}
	default:
		return usagef("--algorithm: want fixed-point, gradient-descent or sampled, got %q", alg)
	}
	if len(p.Mean) == 2 {
		cov := mat.NewSymDense(2, []float64{p.Covariance[0][0], p.Covariance[0][1], p.Covariance[1][0], p.Covariance[1][1]})
		e := gaussfit.EllipseOf(gaussfit.Gaussian{Mean: p.Mean, Cov: cov})
		p.Ellipse = &report.Ellipse{Major: e.Major, Minor: e.Minor, AngleDeg: e.Angle * 180 / math.Pi}
	}
	if params != "" {
		if err := report.WriteJSON(params, c.Bool("force"), p); err != nil {
			return err
		}
	}
	fmt.Printf("Gaussian barycenter of %d fits (%s), %.2fs; estimated objective %.6g\n", p.Inputs, p.Solver, p.Seconds, p.Objective[0])
	fmt.Printf("  mean %s\n  covariance %s\n", fmtVec(p.Mean), fmtMat(p.Covariance))
	return nil
}
