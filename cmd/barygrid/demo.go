package main

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"

	"barygrid/batch"
	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/io/gaussfile"
	"barygrid/pose"
	"barygrid/sinkhorn"

	"github.com/urfave/cli/v2"
)

// demoTol is looser than the command's default: the demo shows the method,
// and 1e-5 in L1 is invisible in its pictures.
const demoTol = 1e-5

// demoSet is one invented scenario with the pixel size a user would give.
type demoSet struct {
	name, what string
	fields     []*grid.Field
	load       fieldfile.LoadSettings
}

func demoCommand() *cli.Command {
	return withUsage(&cli.Command{
		Name:  "demo",
		Usage: "write an invented scenario (nuclei, storm ensemble) and average it as a batch",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "out", Value: "barygrid-demo", Usage: "folder to write into"},
			&cli.BoolFlag{Name: "force", Usage: "regenerate inputs and recompute results of an earlier demo"},
			&cli.IntFlag{Name: "threads", Usage: "worker goroutines (default: all CPUs)"},
		},
		Action: func(c *cli.Context) error {
			dir, force := c.String("out"), c.Bool("force")
			sets := []demoSet{
				{"nuclei", "12 stained nuclei, 0.5 um pixels, camera floor removed at the 30th percentile (as --background p30 does)",
					floorless(nuclei(12, 64, 1), 30), fieldfile.LoadSettings{Dx: 0.5, Unit: "um"}},
				{"storm", "8 rain-rate ensemble members, 2 km pixels",
					storm(8, 80, 2), fieldfile.LoadSettings{Dx: 2, Unit: "km"}},
			}
			// The demo is the daily job on invented data: write the inputs
			// as files, one folder per group, then run the batch over them.
			var rows []batch.Row
			for _, set := range sets {
				g, err := writeDemoInputs(filepath.Join(dir, "inputs", set.name), set, force)
				if err != nil {
					return err
				}
				s := sinkhorn.Settings{Tol: demoTol, Workers: c.Int("threads")}
				settings := map[string]any{"tol": demoTol, "pixel_size": set.load.Dx, "unit": set.load.Unit}
				r := batch.Process(g, batch.Job{Out: dir, Load: set.load, Solver: s, Key: settings, Force: force})
				if r.Status == "failed" {
					return fmt.Errorf("demo group %s failed: %s", set.name, r.Message)
				}
				rows = append(rows, r)
				if err := printDemoGroup(dir, set); err != nil {
					return err
				}
			}
			if err := batch.WriteSummary(filepath.Join(dir, "summary.csv"), rows); err != nil {
				return err
			}
			if err := batch.WriteIndex(dir, rows); err != nil {
				return err
			}
			fmt.Printf("summary: %s and %s (the same as: barygrid batch --out %s %s, with each set's --pixel-size)\n",
				filepath.Join(dir, "summary.csv"), filepath.Join(dir, batch.IndexName), dir, filepath.Join(dir, "inputs"))
			// What follows averaging, on the same invented data.
			return demoExtras(dir, sets, c.Int("threads"), force)
		},
	})
}

// writeDemoInputs saves the set's fields as .npy files. Existing files are
// kept unless force: the scenario is deterministic, and a user's edits win.
func writeDemoInputs(sub string, set demoSet, force bool) (batch.Group, error) {
	if err := os.MkdirAll(sub, 0o755); err != nil {
		return batch.Group{}, fmt.Errorf("%s: %v", sub, err)
	}
	g := batch.Group{Name: set.name}
	for i, f := range set.fields {
		p := filepath.Join(sub, fmt.Sprintf("%s_%02d.npy", set.name, i+1))
		if _, err := os.Stat(p); err != nil || force {
			if _, err := fieldfile.Save(p, f, fieldfile.SaveSettings{Force: force}); err != nil {
				return batch.Group{}, err
			}
		}
		g.Files = append(g.Files, p)
	}
	return g, nil
}

// printDemoGroup reads back the group's report and pixel mean and prints
// how the barycenter, the Gaussian barycenter and the pixel mean compare.
func printDemoGroup(dir string, set demoSet) error {
	sub := filepath.Join(dir, set.name)
	data, err := os.ReadFile(filepath.Join(sub, "report.json"))
	if err != nil {
		return fmt.Errorf("%s: %v", sub, unwrapErr(err))
	}
	var rep batch.Report
	if err := json.Unmarshal(data, &rep); err != nil || rep.Barycenter == nil || rep.Gaussian == nil {
		return fmt.Errorf("%s: unreadable report.json", sub)
	}
	mean, err := fieldfile.Load(filepath.Join(sub, "pixel_mean.npy"), set.load)
	if err != nil {
		return err
	}
	b, gm, u := rep.Barycenter, rep.Gaussian, set.load.Unit
	mm := grid.ComputeMoments(mean)
	fmt.Printf("%s: %s\n", set.name, set.what)
	fmt.Printf("  barycenter: %s in %d iterations (residual %.2g, epsilon %.3g %s^2, %s), %.2fs\n",
		b.Status, b.Iterations, b.Residual, b.Epsilon, u, map[bool]string{true: "debiased", false: "plain"}[b.Debiased], b.Seconds)
	fmt.Printf("  spread (sqrt of covariance trace): barycenter %.3g %s, Gaussian barycenter %.3g %s, pixel mean %.3g %s\n",
		sqrtTrace(b.Covariance), u, math.Sqrt(gm.Covariance[0][0]+gm.Covariance[1][1]), u, sqrtTrace(mm.Cov), u)
	fmt.Printf("  centroid: barycenter (%.4g, %.4g) %s, Gaussian barycenter (%.4g, %.4g) %s\n",
		b.Centroid[0], b.Centroid[1], u, gm.Mean[0], gm.Mean[1], u)
	fmt.Printf("  pictures: %s\n", filepath.Join(sub, "{contact_sheet,barycenter,gauss_barycenter,pixel_mean,convergence}.png"))
	return nil
}

func floorless(fs []*grid.Field, pct float64) []*grid.Field {
	for i, f := range fs {
		fs[i] = grid.SubtractBackground(f, grid.Percentile(f, pct))
	}
	return fs
}

func sqrtTrace(c [2][2]float64) float64 { return math.Sqrt(math.Max(0, c[0][0]+c[1][1])) }

// demoExtras shows what follows averaging: the nuclei brought into one pose
// before averaging (they lie at random angles), and where the storm
// members differ in position (displacement maps, variability, spread).
func demoExtras(dir string, sets []demoSet, threads int, force bool) error {
	s := sinkhorn.Settings{Tol: demoTol, Workers: threads}
	nuc := sets[0].fields
	for _, f := range nuc {
		f.Dx, f.Dy, f.Unit = sets[0].load.Dx, sets[0].load.Dx, sets[0].load.Unit
	}
	posed, err := pose.Normalize(nuc, pose.Settings{Mode: pose.Rotate, Solver: s})
	if err != nil {
		return fmt.Errorf("demo pose: %w", err)
	}
	out := filepath.Join(dir, "nuclei", "posed_barycenter")
	for _, ext := range []string{".npy", ".png"} {
		if err := demoSave(out+ext, posed.Template, force); err != nil {
			return err
		}
	}
	elong := func(f *grid.Field) float64 {
		m := grid.ComputeMoments(f)
		tr, det := m.Cov[0][0]+m.Cov[1][1], m.Cov[0][0]*m.Cov[1][1]-m.Cov[0][1]*m.Cov[1][0]
		d := math.Sqrt(math.Max(0, tr*tr/4-det))
		return math.Sqrt((tr/2 + d) / (tr/2 - d))
	}
	plain, err := fieldfile.Load(filepath.Join(dir, "nuclei", "barycenter.npy"), fieldfile.LoadSettings{})
	if err != nil {
		return err
	}
	fmt.Printf("nuclei posed first (--pose rotate): axis ratio of the template %.2f, against %.2f averaged as they lie; %s.{npy,png}\n",
		elong(posed.Template), elong(plain), out)

	st := sets[1].fields
	for _, f := range st {
		f.Dx, f.Dy, f.Unit = sets[1].load.Dx, sets[1].load.Dx, sets[1].load.Unit
	}
	r, err := sinkhorn.Barycenter(st, s)
	if err != nil || r.Status != sinkhorn.Converged {
		return fmt.Errorf("demo maps: %v", err)
	}
	v, err := sinkhorn.Maps(st, s, r)
	if err != nil {
		return err
	}
	files := make([]string, len(st))
	for i := range files {
		files[i] = fmt.Sprintf("storm_%02d", i+1)
	}
	mdir := filepath.Join(dir, "storm", "maps")
	if err := writeMaps(mdir, true, files, r.Barycenter, v); err != nil {
		return err
	}
	fmt.Printf("storm members differ in position by %.3g km (root of the spread, --maps): displacements and variability.png in %s\n", math.Sqrt(v.Spread), mdir)

	// A second variable carried along each member's plan: the lightning
	// of the average storm, where the pixel mean smears it.
	li := lightning(len(st), st[0].Rows, 2)
	cdir := filepath.Join(dir, "carry", "storm")
	if err := os.MkdirAll(cdir, 0o755); err != nil {
		return err
	}
	for i, f := range li {
		if err := demoSave(filepath.Join(cdir, fmt.Sprintf("lightning_%02d.npy", i+1)), f, force); err != nil {
			return err
		}
	}
	carried, err := sinkhorn.Carry(st, li, s, r)
	if err != nil {
		return fmt.Errorf("demo carry: %w", err)
	}
	mean := li[0].Like()
	for _, f := range li {
		for i, x := range f.Data {
			mean.Data[i] += x / float64(len(li))
		}
	}
	for name, f := range map[string]*grid.Field{"carried_lightning": carried, "lightning_pixel_mean": mean} {
		for _, ext := range []string{".npy", ".png"} {
			if err := demoSave(filepath.Join(dir, "storm", name+ext), f, force); err != nil {
				return err
			}
		}
	}
	peak := func(f *grid.Field) (float64, float64, float64) {
		j := 0
		for i, x := range f.Data {
			if x > f.Data[j] {
				j = i
			}
		}
		return f.Data[j], float64(j%f.Cols) * f.Dx, float64(j/f.Cols) * f.Dy
	}
	pc, xc, yc := peak(carried)
	pm, _, _ := peak(mean)
	_, xb, yb := peak(r.Barycenter)
	fmt.Printf("storm lightning carried along each member's plan (--carry): peak %.3g flashes/km^2/h at (%.0f, %.0f) km, %.2g km from the barycenter's rain peak; the pixel mean of the lightning peaks at %.3g; %s.{npy,png} (inputs in %s)\n",
		pc, xc, yc, math.Hypot(xc-xb, yc-yb), pm, filepath.Join(dir, "storm", "carried_lightning"), cdir)

	// Gaussian fits of a large screen, read as a stream in one pass, and
	// the fixed point on the same fits in memory.
	fits := screen(demoScreen, 3)
	sp := filepath.Join(dir, "screen", "fits.jsonl")
	if err := os.MkdirAll(filepath.Dir(sp), 0o755); err != nil {
		return err
	}
	if _, err := os.Stat(sp); err != nil || force {
		err := fieldfile.WriteAtomic(sp, force, func(w io.Writer) error {
			bw := bufio.NewWriter(w)
			for _, g := range fits {
				c := g.Cov
				fmt.Fprintf(bw, "{\"mean\": [%.4f, %.4f], \"cov\": [[%.5f, %.5f], [%.5f, %.5f]]}\n",
					g.Mean[0], g.Mean[1], c.At(0, 0), c.At(0, 1), c.At(1, 0), c.At(1, 1))
			}
			return bw.Flush()
		})
		if err != nil {
			return err
		}
	}
	var opened []*os.File
	defer func() {
		for _, f := range opened {
			f.Close()
		}
	}()
	open := func() (gaussfit.Source, error) {
		f, err := os.Open(sp)
		if err != nil {
			return nil, err
		}
		opened = append(opened, f)
		return gaussfile.NewLineSource(f, sp), nil
	}
	sr, err := gaussfit.Stream(open, gaussfit.StreamSettings{})
	if err != nil {
		return fmt.Errorf("demo screen: %w", err)
	}
	src, err := open()
	if err != nil {
		return err
	}
	gs, ws, err := gaussfile.ReadAll(src)
	if err != nil {
		return err
	}
	fr, err := gaussfit.Barycenter(gs, gaussfit.Settings{Weights: ws})
	if err != nil {
		return fmt.Errorf("demo screen: %w", err)
	}
	axes := func(g gaussfit.Gaussian) (float64, float64) {
		e := gaussfit.EllipseOf(g)
		return e.Major, e.Minor
	}
	a1, b1 := axes(sr.Barycenter)
	a2, b2 := axes(fr.Barycenter)
	fmt.Printf("screen of %d nucleus fits (%s): streamed in one pass in %.2fs, barycenter axes %.3f x %.3f um; fixed point in memory %.3f x %.3f um, W2 between them %.2g um (gauss --stream %s --algorithm sampled)\n",
		sr.Fits, sp, sr.Elapsed.Seconds(), a1, b1, a2, b2, math.Sqrt(gaussfit.W2Sq(sr.Barycenter, fr.Barycenter)), sp)
	return nil
}

// demoScreen is the number of invented fits of the screen.
const demoScreen = 100000

// demoSave writes f unless the file exists and force is off (the demo is
// deterministic: an earlier run's file holds the same values).
func demoSave(path string, f *grid.Field, force bool) error {
	if _, err := os.Stat(path); err == nil && !force {
		return nil
	}
	_, err := saveFieldAs(path, f, false, fieldfile.SaveSettings{Force: force})
	return err
}
