package main

import (
	"fmt"
	"os"
	"path/filepath"
	"sync"

	"barygrid/batch"

	"github.com/schollz/progressbar/v3"
	"github.com/urfave/cli/v2"
)

func batchCommand() *cli.Command {
	flags := append(inputFlags(), solverFlags()...)
	flags = append(flags,
		&cli.StringFlag{Name: "out", Usage: "output folder (required)"},
		&cli.StringFlag{Name: "manifest", Usage: "CSV with columns group,file[,weight] instead of subfolders"},
		&cli.IntFlag{Name: "jobs", DefaultText: "CPUs, bounded by --memory", Usage: "groups in parallel"},
		&cli.Float64Flag{Name: "memory", Value: 8, Usage: "GiB the parallel groups may use together (estimate)"},
		&cli.StringFlag{Name: "shard", Usage: "process only shard `i/n` of the groups (deterministic; for array jobs)"},
		&cli.BoolFlag{Name: "force", Usage: "recompute groups whose outputs are up to date"},
		&cli.BoolFlag{Name: "quiet", Usage: "no progress output"},
	)
	return withUsage(&cli.Command{
		Name:      "batch",
		Usage:     "process every subfolder (or manifest group) of IN_DIR into OUT/GROUP with reports and pictures",
		ArgsUsage: "IN_DIR --out OUT_DIR  |  --manifest groups.csv --out OUT_DIR",
		Flags:     flags,
		Action:    runBatch,
	})
}

func runBatch(c *cli.Context) error {
	out := c.String("out")
	if out == "" {
		return usagef("batch: --out OUT_DIR is required")
	}
	var (
		groups []batch.Group
		err    error
	)
	switch {
	case c.String("manifest") != "":
		if c.NArg() != 0 {
			return usagef("batch: give IN_DIR or --manifest, not both")
		}
		groups, err = batch.ReadManifest(c.String("manifest"))
	case c.NArg() == 1:
		groups, err = batch.Discover(c.Args().First())
	default:
		return usagef("batch: want one IN_DIR (or --manifest)")
	}
	if err != nil {
		return err
	}
	if v := c.String("shard"); v != "" {
		i, n, err := parseShard(v)
		if err != nil {
			return err
		}
		var keep []batch.Group
		for _, g := range groups {
			if batch.InShard(g.Name, i, n) {
				keep = append(keep, g)
			}
		}
		groups = keep
	}
	s, err := solverSettings(c)
	if err != nil {
		return err
	}
	s.Progress = nil
	ls, err := loadSettings(c)
	if err != nil {
		return err
	}
	resample, err := parseResample(c.String("resample"))
	if err != nil {
		return err
	}
	if err := os.MkdirAll(out, 0o755); err != nil {
		return fmt.Errorf("%s: %v", out, err)
	}
	release, err := batch.Lock(out)
	if err != nil {
		return err
	}
	defer release()
	settings := map[string]any{"epsilon_given": s.Epsilon, "tol": s.Tol, "max_iter": s.MaxIter, "debias": s.Debias, "smooth_debias": s.SmoothDebias,
		"method": c.String("method"), "unbalanced": s.Unbalanced, "pixel_size": c.String("pixel-size"),
		"invert": ls.Invert, "background": c.String("background"), "mask": c.String("mask"),
		"relax": s.Relax, "drop_outside": s.DropOutside, "resample": c.String("resample"), "unit": ls.Unit}
	if p := c.String("mask"); p != "" {
		// The mask's contents, not only its name, decide the result.
		if settings["mask_sha256"], err = batch.Checksum(p); err != nil {
			return err
		}
	}

	var bar *progressbar.ProgressBar
	quiet := c.Bool("quiet")
	if !quiet && isTerminal(os.Stderr) {
		bar = progressbar.NewOptions(len(groups), progressbar.OptionSetWriter(os.Stderr), progressbar.OptionSetDescription("groups"),
			progressbar.OptionShowCount(), progressbar.OptionClearOnFinish())
	}
	var mu sync.Mutex
	done := func(r batch.Row) {
		mu.Lock()
		defer mu.Unlock()
		if !quiet {
			if bar != nil {
				bar.Clear()
			}
			switch r.Status {
			case "failed":
				fmt.Fprintf(os.Stderr, "barygrid: group %s failed: %s\n", r.Group, r.Message)
			case "skipped":
				fmt.Fprintf(os.Stderr, "group %s: up to date, skipped\n", r.Group)
			default:
				fmt.Fprintf(os.Stderr, "group %s: %s, %d inputs, %d iterations, %.2fs\n", r.Group, r.Status, r.Inputs, r.Iterations, r.Seconds)
			}
			if bar != nil {
				bar.RenderBlank()
			}
		}
		if bar != nil {
			bar.Add(1)
		}
	}
	job := batch.Job{Out: out, Load: ls, Resample: resample, Solver: s, Key: settings, Force: c.Bool("force")}
	softMemoryLimit(c.Float64("memory") * (1 << 30))
	rows := batch.Run(groups, job, batch.RunSettings{Jobs: c.Int("jobs"), Memory: c.Float64("memory") * (1 << 30), Done: done})
	if err := batch.WriteSummary(filepath.Join(out, "summary.csv"), rows); err != nil {
		return err
	}
	failed := 0
	for _, r := range rows {
		if r.Status == "failed" {
			failed++
		}
	}
	fmt.Printf("batch: %d groups, %d failed; summary %s\n", len(groups), failed, filepath.Join(out, "summary.csv"))
	if failed > 0 {
		return fmt.Errorf("%d of %d groups failed (see %s)", failed, len(groups), filepath.Join(out, "summary.csv"))
	}
	return nil
}

func parseShard(v string) (int, int, error) {
	var i, n int
	if _, err := fmt.Sscanf(v, "%d/%d", &i, &n); err != nil || n < 1 || i < 1 || i > n {
		return 0, 0, usagef("--shard: want i/n with 1 <= i <= n, got %q", v)
	}
	return i, n, nil
}
