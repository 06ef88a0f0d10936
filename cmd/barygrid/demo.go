package main

import (
	"fmt"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"time"

	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/io/imagefile"
	"barygrid/sinkhorn"

	"github.com/urfave/cli/v2"
)

func demoCommand() *cli.Command {
	return withUsage(&cli.Command{
		Name:  "demo",
		Usage: "write an invented scenario (nuclei, storm ensemble) and average it",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "out", Value: "barygrid-demo", Usage: "folder to write into"},
			&cli.BoolFlag{Name: "force", Usage: "replace files of an earlier demo"},
			&cli.IntFlag{Name: "threads", Usage: "worker goroutines (default: all CPUs)"},
		},
		Action: func(c *cli.Context) error {
			dir := c.String("out")
			force := c.Bool("force")
			sets := []struct {
				name, what string
				fields     []*grid.Field
			}{
				{"nuclei", "12 stained nuclei, 0.5 um pixels, camera floor removed at the 30th percentile (--background p30)", floorless(nuclei(12, 64, 1), 30)},
				{"storm", "8 rain-rate ensemble members, 2 km pixels", storm(8, 80, 2)},
			}
			save := func(path string, f *grid.Field, s fieldfile.SaveSettings) error {
				s.Force = force
				_, err := fieldfile.Save(path, f, s)
				return err
			}
			var batchIn []string
			for _, set := range sets {
				sub := filepath.Join(dir, set.name)
				if err := os.MkdirAll(filepath.Join(sub, "inputs"), 0o755); err != nil {
					return fmt.Errorf("%s: %v", sub, err)
				}
				var files []string
				batchIn = append(batchIn, filepath.Join(sub, "inputs"))
				for i, f := range set.fields {
					p := filepath.Join(sub, "inputs", fmt.Sprintf("%s_%02d.npy", set.name, i+1))
					if err := save(p, f, fieldfile.SaveSettings{}); err != nil {
						return err
					}
					files = append(files, p)
				}
				t := time.Now()
				r, err := sinkhorn.Barycenter(set.fields, sinkhorn.Settings{Workers: c.Int("threads"), Tol: demoTol})
				if err != nil {
					return err
				}
				mean := pixelMean(set.fields)
				gb, gmass, err := gaussBarycenter(set.fields)
				if err != nil {
					return err
				}
				dx, dy := set.fields[0].PixelSize()
				gfield := gaussfit.Render(gb, set.fields[0].Rows, set.fields[0].Cols, dx, dy, 1)
				gfield.Dx, gfield.Dy, gfield.Unit = dx, dy, set.fields[0].Unit
				_ = gmass
				outs := map[string]*grid.Field{"barycenter": r.Barycenter, "pixel_mean": mean, "gauss_barycenter": gfield}
				for name, f := range outs {
					if err := save(filepath.Join(sub, name+".npy"), f, fieldfile.SaveSettings{}); err != nil {
						return err
					}
					if err := save(filepath.Join(sub, name+".png"), f, fieldfile.SaveSettings{Color: true}); err != nil {
						return err
					}
				}
				if err := writeOverlay(filepath.Join(sub, "gauss_ellipses.png"), force, set.fields, mean, gb); err != nil {
					return err
				}
				rep := newBaryReport(files, set.fields, nil, sinkhorn.Settings{}, r)
				if err := writeJSON(filepath.Join(sub, "report.json"), force, rep); err != nil {
					return err
				}
				bm, mm := grid.ComputeMoments(r.Barycenter), grid.ComputeMoments(mean)
				u := set.fields[0].Unit
				fmt.Printf("%s: %s\n", set.name, set.what)
				fmt.Printf("  barycenter: %s in %d iterations (residual %.2g, epsilon %.3g %s^2, %s), %.2fs\n",
					r.Status, r.Iterations, r.Residual, r.Epsilon, u, map[bool]string{true: "debiased", false: "plain"}[r.Debiased], time.Since(t).Seconds())
				gm := gaussfit.EllipseOf(gb)
				fmt.Printf("  spread (sqrt of covariance trace): barycenter %.3g %s, Gaussian barycenter %.3g %s, pixel mean %.3g %s\n",
					sqrtTrace(bm.Cov), u, math.Hypot(gm.Major, gm.Minor), u, sqrtTrace(mm.Cov), u)
				fmt.Printf("  centroid: barycenter (%.4g, %.4g) %s, Gaussian barycenter (%.4g, %.4g) %s\n",
					bm.Mean[0], bm.Mean[1], u, gb.Mean[0], gb.Mean[1], u)
				fmt.Printf("  pictures: %s, %s, %s, %s\n", filepath.Join(sub, "barycenter.png"), filepath.Join(sub, "gauss_barycenter.png"),
					filepath.Join(sub, "gauss_ellipses.png"), filepath.Join(sub, "pixel_mean.png"))
			}
			// End with a batch over the scenario, as a user runs it daily: one
			// group per set (a manifest pointing at the inputs just written).
			man := filepath.Join(dir, "batch_groups.csv")
			err := fieldfile.WriteAtomic(man, true, func(w io.Writer) error {
				fmt.Fprintln(w, "group,file")
				for i, set := range sets {
					names, _ := filepath.Glob(filepath.Join(batchIn[i], "*.npy"))
					for _, n := range names {
						rel, _ := filepath.Rel(dir, n)
						fmt.Fprintf(w, "%s,%s\n", set.name, rel)
					}
				}
				return nil
			})
			if err != nil {
				return err
			}
			bdir := filepath.Join(dir, "batch")
			groups, err := readManifest(man)
			if err != nil {
				return err
			}
			s := sinkhorn.Settings{Tol: demoTol, Workers: c.Int("threads")}
			settings := map[string]any{"tol": demoTol, "demo": true}
			if err := os.MkdirAll(bdir, 0o755); err != nil {
				return fmt.Errorf("%s: %v", bdir, err)
			}
			var rows []summaryRow
			for _, g := range groups {
				rows = append(rows, processGroup(g, bdir, fieldfile.LoadSettings{}, s, settings, force, ""))
			}
			if err := writeSummary(filepath.Join(bdir, "summary.csv"), rows); err != nil {
				return err
			}
			fmt.Printf("batch over the scenario: %s (contact sheets and convergence plots in %s/GROUP/)\n",
				filepath.Join(bdir, "summary.csv"), bdir)
			for _, r := range rows {
				if r.Status == "failed" {
					return fmt.Errorf("demo batch group %s failed: %s", r.Group, r.Message)
				}
			}
			return nil
		},
	})
}

func writeOverlay(path string, force bool, fs []*grid.Field, mean *grid.Field, bary gaussfit.Gaussian) error {
	var gs []gaussfit.Gaussian
	for _, f := range fs {
		g, _, err := gaussfit.Fit(f, gaussfit.FitSettings{})
		if err != nil {
			return err
		}
		gs = append(gs, g)
	}
	bg, _ := imagefile.Colorize(mean, imagefile.WriteSettings{})
	dx, dy := fs[0].PixelSize()
	im := gaussfit.Overlay(bg, dx, dy, max(1, 512/max(fs[0].Rows, fs[0].Cols)), gs, bary)
	return fieldfile.WriteAtomic(path, force, func(w io.Writer) error { return png.Encode(w, im) })
}

// demoTol is looser than the command's default: the demo shows the method,
// and 1e-5 in L1 is invisible in its pictures.
const demoTol = 1e-5

func floorless(fs []*grid.Field, pct float64) []*grid.Field {
	for i, f := range fs {
		fs[i] = grid.SubtractBackground(f, grid.Percentile(f, pct))
	}
	return fs
}

// gaussBarycenter fits every field and returns the fixed-point barycenter.
func gaussBarycenter(fs []*grid.Field) (gaussfit.Gaussian, float64, error) {
	var gs []gaussfit.Gaussian
	var mass float64
	for _, f := range fs {
		g, m, err := gaussfit.Fit(f, gaussfit.FitSettings{})
		if err != nil {
			return gaussfit.Gaussian{}, 0, err
		}
		gs = append(gs, g)
		mass += m
	}
	r, err := gaussfit.Barycenter(gs, gaussfit.Settings{})
	if err != nil {
		return gaussfit.Gaussian{}, 0, err
	}
	return r.Barycenter, mass / float64(len(fs)), nil
}

func sqrtTrace(c [2][2]float64) float64 {
	t := c[0][0] + c[1][1]
	if t < 0 {
		return 0
	}
	return sqrtf(t)
}
