package main

import (
	"barygrid/ensemble"
	"barygrid/io/imagefile"
	"barygrid/io/npy"
	"barygrid/pose"
	"barygrid/render"
	"barygrid/report"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/sinkhorn"

	"github.com/urfave/cli/v2"
)

// solverFlags are the entropic-solver options shared by every command that
// runs Sinkhorn iterations.
func solverFlags() []cli.Flag {
	return []cli.Flag{
		&cli.Float64Flag{Name: "epsilon", DefaultText: "one squared pixel; (side/24)^2 of it on grids under 24 pixels a side", Usage: "smoothing, in squared physical units: the barycenter is blurred by about epsilon/2 in variance per axis; larger is smoother and faster"},
		&cli.Float64Flag{Name: "tol", Value: 1e-6, Usage: "stop when every input's transport plan matches the input to this fraction of its mass (first-marginal violation, L1)"},
		&cli.IntFlag{Name: "max-iter", Value: 10000, Usage: "iteration cap"},
		&cli.BoolFlag{Name: "debias", Usage: "remove the blur of a large epsilon (debiased barycenter, exact update); on thin structures its answer grows streaks as the iteration goes on and it converges slowly, so it is off by default"},
		&cli.BoolFlag{Name: "smooth-debias", Usage: "debias with the debiasing field kept as smooth as the blur it undoes: no streaks, and it settles; the debiasing equation then holds only up to finer detail (the report gives both residuals)"},
		&cli.StringFlag{Name: "method", Value: "auto", Usage: "how numbers are held: auto; scaling (fastest, fails when epsilon is small for the distances mass travels); log (log domain: always works, slower)"},
		&cli.IntFlag{Name: "threads", DefaultText: "all CPUs", Usage: "worker goroutines (results do not depend on it)"},
		&cli.Float64Flag{Name: "unbalanced", DefaultText: "off: every input is normalised to the same mass", Usage: "let total intensity differ between inputs: creating or destroying mass costs `RHO` (squared physical units) per unit of mass mismatch, moving it costs its squared distance (KL-relaxed marginals)"},
		&cli.StringFlag{Name: "mask", Usage: "confine the barycenter to the non-zero pixels of `FILE`"},
		&cli.BoolFlag{Name: "drop-outside", Usage: "drop input mass outside the mask (reported) instead of failing"},
		&cli.Float64Flag{Name: "relax", DefaultText: "chosen from the observed convergence rate", Usage: "over-relaxation factor in (0, 2) that speeds the iteration up; 1 is the plain iteration"},
	}
}

func solverSettings(c *cli.Context) (sinkhorn.Settings, error) {
	s := sinkhorn.Settings{Epsilon: c.Float64("epsilon"), Tol: c.Float64("tol"), MaxIter: c.Int("max-iter"),
		Debias: c.Bool("debias"), SmoothDebias: c.Bool("smooth-debias"), Workers: c.Int("threads"), Relax: c.Float64("relax")}
	s.Unbalanced = c.Float64("unbalanced")
	if c.IsSet("unbalanced") && !(s.Unbalanced > 0) {
		return s, usagef("--unbalanced must be positive, got %g", s.Unbalanced)
	}
	if p := c.String("mask"); p != "" {
		ls, err := loadSettings(c)
		if err != nil {
			return s, err
		}
		m, err := fieldfile.Load(p, fieldfile.LoadSettings{MaxPixels: ls.MaxPixels, SkipValidate: true})
		if err != nil {
			return s, err
		}
		s.Mask = m
	}
	s.DropOutside = c.Bool("drop-outside")
	if c.IsSet("relax") && !(s.Relax > 0 && s.Relax < 2) {
		return s, usagef("--relax must lie in (0, 2), got %g", s.Relax)
	}
	if c.IsSet("epsilon") && !(s.Epsilon > 0) {
		return s, usagef("--epsilon must be positive, got %g", s.Epsilon)
	}
	if !(s.Tol > 0) {
		return s, usagef("--tol must be positive, got %g", s.Tol)
	}
	if s.MaxIter <= 0 {
		return s, usagef("--max-iter must be positive, got %d", s.MaxIter)
	}
	switch c.String("method") {
	case "auto":
	case "scaling":
		s.Method = sinkhorn.MethodScaling
	case "log":
		s.Method = sinkhorn.MethodLog
	default:
		return s, usagef("--method: want auto, scaling or log, got %q", c.String("method"))
	}
	if isTerminal(os.Stderr) {
		last := time.Now()
		s.Progress = func(it int, r float64) {
			if time.Since(last) > 200*time.Millisecond {
				fmt.Fprintf(os.Stderr, "\riteration %6d  residual %.3e ", it, r)
				last = time.Now()
			}
		}
	}
	return s, nil
}

func printRanking(ranks []report.Rank) {
	fmt.Println("divergence to the barycenter (largest first; outlier: above median + 3 scaled MAD):")
	for _, e := range ranks {
		flag := ""
		if e.Outlier {
			flag = "  OUTLIER"
		}
		fmt.Printf("  %12.6g  z=%6.2f  %s%s\n", e.Divergence, e.Score, e.File, flag)
	}
}

func barycenterCommand() *cli.Command {
	flags := append(inputFlags(), solverFlags()...)
	flags = append(flags, outputFlags()...)
	flags = append(flags,
		&cli.StringFlag{Name: "weights", Usage: "comma-separated weights `w1,w2,...`, one per input (normalised to sum 1)"},
		&cli.StringFlag{Name: "out", Usage: "write the barycenter to `FILE` (.npy, .csv, .png, .tif)"},
		&cli.StringFlag{Name: "report", Usage: "write a JSON report to `FILE.json`"},
		&cli.StringFlag{Name: "sheet", Usage: "write a contact sheet PNG (inputs, pixel mean, barycenter, Gaussian ellipses) to `FILE`"},
		&cli.StringFlag{Name: "maps", Usage: "write where the inputs differ to folder `DIR`: each input's displacement from the barycenter (NAME.displacement.npy, rows x columns x 2: x then y, physical units, and NAME.displacement.png arrows over the barycenter) and the mean displacement length (variability.npy, variability.png with a colour bar); the report gets the spread"},
		&cli.StringFlag{Name: "pose", Value: "none", Usage: "bring the inputs into one pose first: none, shift (centroids together), rotate (also turn them so their principal axes and shapes agree) or rotate-flip (also allow mirror images); the barycenter is returned in the inputs' mean pose and the report lists each input's angle"},
		&cli.IntFlag{Name: "pose-rounds", Value: 2, Usage: "rounds of turning each input towards the current template before the final one; each costs about one more barycenter and search (1 is faster and enough for copies of one shape; mixed shapes keep changing)"},
		&cli.StringFlag{Name: "carry", Usage: "a second field per input, `A,B,...` in the inputs' order (a second stain, a second variable): each is moved along its input's transport plan into the barycenter's frame and averaged there (needs --carry-out)"},
		&cli.StringFlag{Name: "carry-out", Usage: "write the averaged carried field to `FILE`"},
		&cli.BoolFlag{Name: "rank", Usage: "rank the inputs by Sinkhorn divergence to the barycenter and flag outliers (median + 3 scaled MAD)"},
	)
	return withUsage(&cli.Command{
		Name:      "barycenter",
		Usage:     "entropic Wasserstein barycenter of fields on a common grid",
		ArgsUsage: "FILE...",
		Flags:     flags,
		Action: func(c *cli.Context) error {
			files := c.Args().Slice()
			out, reportPath, sheetPath := c.String("out"), c.String("report"), c.String("sheet")
			carryOut := c.String("carry-out")
			if err := checkOutputs(c.Bool("force"), out, reportPath, sheetPath, carryOut); err != nil {
				return err
			}
			var carryFiles []string
			if v := c.String("carry"); v != "" {
				carryFiles = strings.Split(v, ",")
				if len(carryFiles) != len(files) {
					return usagef("--carry: %d files for %d inputs", len(carryFiles), len(files))
				}
				if carryOut == "" {
					return usagef("--carry needs --carry-out FILE")
				}
			}
			s, err := solverSettings(c)
			if err != nil {
				return err
			}
			fs, labels, err := loadFields(c, files)
			if err != nil {
				return err
			}
			files = labels // a NetCDF stack's planes are inputs of their own
			if s.Weights, err = parseWeights(c.String("weights"), len(fs)); err != nil {
				return err
			}
			mode, err := pose.ParseMode(c.String("pose"))
			if err != nil {
				return usagef("--pose: want none, shift, rotate or rotate-flip, got %q", c.String("pose"))
			}
			if mode != pose.None && carryFiles != nil {
				return usagef("--carry with --pose is not supported: the carried fields would need the same turns")
			}
			var (
				r     *sinkhorn.Result
				posed *pose.Result
			)
			solveFields := fs
			if mode == pose.None {
				r, err = sinkhorn.Barycenter(fs, s)
			} else {
				ps := s
				ps.Progress = nil
				if c.Int("pose-rounds") < 1 {
					return usagef("--pose-rounds must be at least 1, got %d", c.Int("pose-rounds"))
				}
				posed, err = pose.Normalize(fs, pose.Settings{Mode: mode, Solver: ps, Rounds: c.Int("pose-rounds")})
				if err == nil {
					// The report and the output show the template in the mean
					// pose; maps and ranking use the posed inputs and the
					// template in their common frame.
					rr := *posed.Barycenter
					rr.Barycenter = posed.Template
					r, solveFields = &rr, posed.Posed
				}
			}
			if s.Progress != nil {
				fmt.Fprint(os.Stderr, "\r\033[K")
			}
			if err != nil {
				return maskError(c, err)
			}
			rep := report.NewBarycenter(files, fs, s.Weights, s, r)
			if posed != nil {
				for i, t := range posed.Transforms {
					rep.Inputs[i].Pose = &report.Pose{AngleDeg: t.AngleDeg, Flipped: t.Flipped, Shift: t.Shift, LostFraction: t.Lost}
				}
				rep.PoseMode = mode.String()
			}
			frame := r
			if posed != nil {
				fr := *posed.Barycenter
				frame = &fr
			}
			if c.Bool("rank") && r.Status == sinkhorn.Converged {
				ranks, err := rankInputs(files, solveFields, frame.Barycenter, s)
				if err != nil {
					return err
				}
				rep.Ranking = ranks
				defer printRanking(ranks)
			}
			if r.Barycenter == nil {
				return fmt.Errorf("barycenter failed: %s", r.Message)
			}
			if out != "" {
				sc, err := saveField(c, out, r.Barycenter)
				if err != nil {
					return err
				}
				rep.Output, rep.Scaling = out, sc
			}
			if carryFiles != nil && r.Status == sinkhorn.Converged {
				ls, err := loadSettings(c)
				if err != nil {
					return err
				}
				cs := make([]*grid.Field, len(carryFiles))
				for i, p := range carryFiles {
					if cs[i], err = fieldfile.Load(p, ls); err != nil {
						return err
					}
				}
				carried, err := sinkhorn.Carry(fs, cs, s, r)
				if err != nil {
					return err
				}
				if _, err := saveField(c, carryOut, carried); err != nil {
					return err
				}
				rep.CarryOutput = carryOut
			}
			if dir := c.String("maps"); dir != "" && r.Status == sinkhorn.Converged {
				v, err := sinkhorn.Maps(solveFields, s, frame)
				if err != nil {
					return err
				}
				if err := writeMaps(dir, c.Bool("force"), files, frame.Barycenter, v); err != nil {
					return err
				}
				rep.Spread, rep.Maps = v.Spread, dir
				fmt.Printf("spread of the inputs around the barycenter: %.4g%s (maps in %s)\n", v.Spread, unitSq(fs[0].Unit), dir)
			}
			if reportPath != "" {
				if err := report.WriteJSON(reportPath, c.Bool("force"), rep); err != nil {
					return err
				}
			}
			if sheetPath != "" && r.Barycenter != nil {
				if err := writeSheet(sheetPath, c.Bool("force"), "barycenter", files, fs, r.Barycenter); err != nil {
					return err
				}
			}
			fmt.Printf("barycenter of %d fields (%dx%d): %s after %d iterations, residual %.3g, epsilon %.4g%s, %s, %.2fs\n",
				len(fs), fs[0].Rows, fs[0].Cols, r.Status, r.Iterations, r.Residual, r.Epsilon, unitSq(fs[0].Unit),
				debiasWord(r.Debiased, s.SmoothDebias), r.Elapsed.Seconds())
			if r.Status != sinkhorn.Converged {
				return fmt.Errorf("barycenter did not converge: %s", r.Message)
			}
			return nil
		},
	})
}

func unitSq(u string) string {
	if u == "" {
		return " px^2"
	}
	return " " + u + "^2"
}

// writeSheet writes a contact sheet of the inputs, their pixel mean, the
// given barycenter (nil: none) and the Gaussian ellipses.
func writeSheet(path string, force bool, title string, files []string, fs []*grid.Field, bary *grid.Field) error {
	var gs []gaussfit.Gaussian
	for i, f := range fs {
		g, _, err := gaussfit.Fit(f, gaussfit.FitSettings{})
		if err != nil {
			return fmt.Errorf("%s: %w", files[i], err)
		}
		gs = append(gs, g)
	}
	gr, err := gaussfit.Barycenter(gs, gaussfit.Settings{})
	if err != nil {
		return err
	}
	mean, err := ensemble.PixelMean(fs)
	if err != nil {
		return err
	}
	if bary == nil {
		dx, dy := fs[0].PixelSize()
		bary = gaussfit.Render(gr.Barycenter, fs[0].Rows, fs[0].Cols, dx, dy, 1)
	}
	labels := make([]string, len(files))
	for i, f := range files {
		labels[i] = filepath.Base(f)
	}
	return fieldfile.SaveImage(path, render.Summary(title, labels, fs, mean, bary, gs, gr.Barycenter), force)
}

// maskError names the --mask file in errors about the mask.
func maskError(c *cli.Context, err error) error {
	if errors.Is(err, sinkhorn.ErrMask) {
		return fmt.Errorf("%s: %w", c.String("mask"), err)
	}
	return err
}

// writeMaps writes the displacement of every input, pictures of them over
// the barycenter, and the variability map with its colour bar.
func writeMaps(dir string, force bool, files []string, bary *grid.Field, v *sinkhorn.Variation) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("%s: %v", dir, unwrapErr(err))
	}
	_, top := bary.MinMax()
	mask := make([]bool, len(bary.Data))
	for i, x := range bary.Data {
		mask[i] = x > 0.05*top
	}
	bg, _ := render.Colorize(bary, imagefile.WriteSettings{})
	zoom := max(1, 512/max(bary.Rows, bary.Cols))
	step := max(1, max(bary.Rows, bary.Cols)/24)
	for i, d := range v.Displacements {
		name := strings.TrimSuffix(filepath.Base(files[i]), filepath.Ext(files[i]))
		data := make([]float64, 0, 2*len(d.X.Data))
		for j := range d.X.Data {
			data = append(data, d.X.Data[j], d.Y.Data[j])
		}
		err := fieldfile.WriteAtomic(filepath.Join(dir, name+".displacement.npy"), force, func(w io.Writer) error {
			return npy.WriteArray(w, []int{bary.Rows, bary.Cols, 2}, data)
		})
		if err != nil {
			return err
		}
		if err := fieldfile.SaveImage(filepath.Join(dir, name+".displacement.png"), render.Arrows(bg, d.X, d.Y, mask, step, zoom), force); err != nil {
			return err
		}
	}
	if _, err := fieldfile.Save(filepath.Join(dir, "variability.npy"), v.Variability, fieldfile.SaveSettings{Force: force}); err != nil {
		return err
	}
	unit := v.Variability.Unit
	if unit == "" {
		unit = "px"
	}
	return fieldfile.SaveImage(filepath.Join(dir, "variability.png"), render.WithColorBar(v.Variability, unit, zoom), force)
}

// debiasWord names the barycenter computed, for the summary line.
func debiasWord(debiased, smooth bool) string {
	switch {
	case smooth:
		return "debiased (smooth)"
	case debiased:
		return "debiased"
	}
	return "plain"
}
