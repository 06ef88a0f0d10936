package main

import (
	"barygrid/internal/parallel"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"image"
	"image/color"
	"image/gif"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"

	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/io/imagefile"
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
			fs, err := loadFields(c, c.Args().Slice())
			if err != nil {
				return err
			}
			frames := make([]*grid.Field, n)
			var ga, gb gaussfit.Gaussian
			if c.Bool("gauss") {
				if ga, _, err = gaussfit.Fit(fs[0], gaussfit.FitSettings{}); err != nil {
					return fmt.Errorf("%s: %w", c.Args().Get(0), err)
				}
				if gb, _, err = gaussfit.Fit(fs[1], gaussfit.FitSettings{}); err != nil {
					return fmt.Errorf("%s: %w", c.Args().Get(1), err)
				}
			}
			dx, dy := fs[0].PixelSize()
			// Frames are weighted barycenters for t from 0 to 1, each
			// warm-started from the previous frame's scalings, which are
			// close: the iteration then needs a fraction of the cold count.
			errs := make([]error, n)
			inner := s
			inner.Progress = nil
			var warm *sinkhorn.WarmStart
			iters := 0
			for i := 0; i < n; i++ {
				t := float64(i) / float64(n-1)
				if c.Bool("gauss") {
					frames[i] = gaussfit.Render(gaussfit.Geodesic(ga, gb, t), fs[0].Rows, fs[0].Cols, dx, dy, 1)
					continue
				}
				if (t == 0 || t == 1) && s.Unbalanced == 0 && s.Mask == nil {
					frames[i], errs[i] = grid.Normalize(fs[int(t)])
					continue
				}
				ss := inner
				ss.Weights = []float64{1 - t, t}
				ss.Warm = warm
				r, err := sinkhorn.Barycenter(fs, ss)
				if err == nil && r.Status != sinkhorn.Converged {
					err = fmt.Errorf("frame %d (t = %.3g) did not converge: %s", i, t, r.Message)
				}
				if err != nil {
					errs[i] = maskError(c, err)
					break
				}
				frames[i], warm = r.Barycenter, r.Warm
				iters += r.Iterations
			}
			for _, e := range errs {
				if e != nil {
					return e
				}
			}
			if dir != "" {
				if err := os.MkdirAll(dir, 0o755); err != nil {
					return fmt.Errorf("%s: %v", dir, err)
				}
				for i, f := range frames {
					p := filepath.Join(dir, fmt.Sprintf("frame_%03d.%s", i, format))
					if _, err := fieldfile.Save(p, f, saveSettings(c)); err != nil {
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

// writeGIF writes the frames through the Ember colour map on one common
// scale (the largest value over all frames), so brightness compares across
// frames.
func writeGIF(path string, force bool, frames []*grid.Field) error {
	var top float64
	for _, f := range frames {
		_, hi := f.MinMax()
		top = math.Max(top, hi)
	}
	pal := make(color.Palette, 256)
	for i := range pal {
		pal[i] = imagefile.Ember[i]
	}
	anim := &gif.GIF{}
	for _, f := range frames {
		im := image.NewPaletted(image.Rect(0, 0, f.Cols, f.Rows), pal)
		for i, v := range f.Data {
			q := int(math.Round(v / top * 255))
			im.Pix[(i/f.Cols)*im.Stride+i%f.Cols] = uint8(max(0, min(255, q)))
		}
		anim.Image = append(anim.Image, im)
		anim.Delay = append(anim.Delay, 12)
	}
	return fieldfile.WriteAtomic(path, force, func(w io.Writer) error { return gif.EncodeAll(w, anim) })
}

type distanceJSON struct {
	A          string  `json:"a,omitempty"`
	B          string  `json:"b,omitempty"`
	Divergence float64 `json:"divergence,omitempty"`
	W2Sq       float64 `json:"w2_squared,omitempty"`
	Kind       string  `json:"kind"`
	Epsilon    float64 `json:"epsilon,omitempty"`
	Tol        float64 `json:"tol,omitempty"`
	Unit       string  `json:"unit,omitempty"`
	Iterations []int   `json:"iterations,omitempty"`
	Unbalanced float64 `json:"unbalanced_penalty,omitempty"`
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
			fs, err := loadFields(c, files)
			if err != nil {
				return err
			}
			dist := func(a, b *grid.Field, workers int) (float64, []int, error) {
				if c.Bool("gauss") {
					ga, _, err := gaussfit.Fit(a, gaussfit.FitSettings{})
					if err != nil {
						return 0, nil, err
					}
					gb, _, err := gaussfit.Fit(b, gaussfit.FitSettings{})
					if err != nil {
						return 0, nil, err
					}
					return gaussfit.W2Sq(ga, gb), nil, nil
				}
				ss := s
				ss.Workers = workers
				var (
					d   float64
					rs  []*sinkhorn.TransportResult
					err error
				)
				if s.Unbalanced > 0 {
					d, rs, err = sinkhorn.UnbalancedDivergence(a, b, s.Unbalanced, ss)
				} else {
					d, rs, err = sinkhorn.Divergence(a, b, ss)
				}
				var its []int
				for _, r := range rs {
					if r != nil {
						its = append(its, r.Iterations)
						if err == nil && r.Status != sinkhorn.Converged {
							err = fmt.Errorf("Sinkhorn iteration did not converge (residual %.3g after %d iterations)", r.Residual, r.Iterations)
						}
					}
				}
				return d, its, err
			}
			eps := s.Epsilon
			if eps == 0 {
				dx, dy := fs[0].PixelSize()
				eps = sinkhorn.DefaultEpsilon(fs[0].Rows, fs[0].Cols, dx, dy)
			}
			if !matrix {
				d, its, err := dist(fs[0], fs[1], s.Workers)
				if err != nil {
					return err
				}
				if c.Bool("json") {
					o := distanceJSON{A: files[0], B: files[1], Kind: "sinkhorn-divergence", Divergence: d, Epsilon: eps, Tol: s.Tol, Unit: fs[0].Unit, Iterations: its, Unbalanced: s.Unbalanced}
					if s.Unbalanced > 0 {
						o.Kind = "unbalanced-sinkhorn-divergence"
					}
					if c.Bool("gauss") {
						o = distanceJSON{A: files[0], B: files[1], Kind: "gaussian-w2-squared", W2Sq: d, Unit: fs[0].Unit}
					}
					return json.NewEncoder(os.Stdout).Encode(o)
				}
				fmt.Printf("%.10g\n", d)
				return nil
			}
			n := len(fs)
			m := make([][]float64, n)
			for i := range m {
				m[i] = make([]float64, n)
			}
			var pairs [][2]int
			for i := 0; i < n; i++ {
				for j := i + 1; j < n; j++ {
					pairs = append(pairs, [2]int{i, j})
				}
			}
			errs := make([]error, len(pairs))
			parallel.For(len(pairs), s.Workers, func(k int) {
				i, j := pairs[k][0], pairs[k][1]
				d, _, err := dist(fs[i], fs[j], 1)
				if err != nil {
					errs[k] = fmt.Errorf("%s vs %s: %w", files[i], files[j], err)
				}
				// Symmetric with zero diagonal by construction.
				m[i][j], m[j][i] = d, d
			})
			for _, e := range errs {
				if e != nil {
					return e
				}
			}
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

// rankEntry is one input in the --rank table.
type rankEntry struct {
	File       string  `json:"file"`
	Divergence float64 `json:"divergence"`
	Score      float64 `json:"robust_z"`
	Outlier    bool    `json:"outlier"`
}

// rankInputs returns each input's Sinkhorn divergence to the barycenter,
// sorted, with outliers flagged by the rule divergence > median + 3 * MAD /
// 0.6745 (the scaled median absolute deviation; Hampel 1974, Leys et al.
// 2013), robust because the outliers themselves barely move the median.
func rankInputs(files []string, fs []*grid.Field, bary *grid.Field, s sinkhorn.Settings) ([]rankEntry, error) {
	out := make([]rankEntry, len(fs))
	errs := make([]error, len(fs))
	inner := s
	inner.Workers, inner.Progress = 1, nil
	parallel.For(len(fs), s.Workers, func(i int) {
		d, _, err := sinkhorn.Divergence(fs[i], bary, inner)
		out[i], errs[i] = rankEntry{File: files[i], Divergence: d}, err
	})
	for i, e := range errs {
		if e != nil {
			return nil, fmt.Errorf("%s: %w", files[i], e)
		}
	}
	ds := make([]float64, len(out))
	for i, e := range out {
		ds[i] = e.Divergence
	}
	med := median(ds)
	dev := make([]float64, len(ds))
	for i, d := range ds {
		dev[i] = math.Abs(d - med)
	}
	mad := median(dev) / 0.6745
	for i := range out {
		if mad > 0 {
			out[i].Score = (out[i].Divergence - med) / mad
		}
		out[i].Outlier = mad > 0 && out[i].Score > 3
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Divergence > out[j].Divergence })
	return out, nil
}

func median(xs []float64) float64 {
	s := append([]float64(nil), xs...)
	sort.Float64s(s)
	n := len(s)
	if n == 0 {
		return 0
	}
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}
