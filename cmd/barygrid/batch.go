package main

import (
	"barygrid/ensemble"
	"barygrid/internal/parallel"
	"barygrid/report"
	"crypto/sha256"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"hash/fnv"
	"image/png"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/io/imagefile"
	"barygrid/render"
	"barygrid/sinkhorn"

	"github.com/schollz/progressbar/v3"
	"github.com/urfave/cli/v2"
	"gonum.org/v1/plot/vg"
)

// group is one unit of batch work: a name and its input files.
type group struct {
	Name    string
	Files   []string
	Weights []float64 // nil: equal
}

var fieldExt = map[string]bool{".png": true, ".jpg": true, ".jpeg": true, ".tif": true, ".tiff": true,
	".bmp": true, ".npy": true, ".csv": true, ".tsv": true}

// discoverGroups lists the subfolders of dir (sorted) with their field files.
func discoverGroups(dir string) ([]group, error) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("%s: %v", dir, unwrapErr(err))
	}
	var gs []group
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			continue
		}
		// Stat follows symbolic links: a linked folder is a group too.
		if st, err := os.Stat(filepath.Join(dir, e.Name())); err != nil || !st.IsDir() {
			continue
		}
		files, err := os.ReadDir(filepath.Join(dir, e.Name()))
		if err != nil {
			return nil, fmt.Errorf("%s: %v", filepath.Join(dir, e.Name()), unwrapErr(err))
		}
		g := group{Name: e.Name()}
		for _, f := range files {
			if !f.IsDir() && fieldExt[strings.ToLower(filepath.Ext(f.Name()))] {
				g.Files = append(g.Files, filepath.Join(dir, e.Name(), f.Name()))
			}
		}
		sort.Strings(g.Files)
		if len(g.Files) > 0 {
			gs = append(gs, g)
		}
	}
	if len(gs) == 0 {
		return nil, fmt.Errorf("%s: no subfolder holds field files", dir)
	}
	return gs, nil
}

// readManifest reads group,file[,weight] rows; relative files are taken
// from the manifest's folder.
func readManifest(path string) ([]group, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("%s: %v", path, unwrapErr(err))
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.FieldsPerRecord = -1
	recs, err := r.ReadAll()
	if err != nil {
		return nil, fmt.Errorf("%s: %v", path, err)
	}
	byName := map[string]*group{}
	var order []string
	for i, rec := range recs {
		if i == 0 && len(rec) >= 2 && rec[0] == "group" && rec[1] == "file" {
			continue
		}
		if len(rec) < 2 || len(rec) > 3 || rec[0] == "" || rec[1] == "" {
			return nil, fmt.Errorf("%s: line %d: want group,file[,weight]", path, i+1)
		}
		if strings.ContainsAny(rec[0], `/\`) || rec[0] == "." || rec[0] == ".." {
			return nil, fmt.Errorf("%s: line %d: group name %q is not a folder name", path, i+1, rec[0])
		}
		g := byName[rec[0]]
		if g == nil {
			g = &group{Name: rec[0]}
			byName[rec[0]] = g
			order = append(order, rec[0])
		}
		file := rec[1]
		if !filepath.IsAbs(file) {
			file = filepath.Join(filepath.Dir(path), file)
		}
		g.Files = append(g.Files, file)
		w := 1.0
		if len(rec) == 3 {
			if w, err = strconv.ParseFloat(rec[2], 64); err != nil || !(w >= 0) {
				return nil, fmt.Errorf("%s: line %d: weight %q is not a non-negative number", path, i+1, rec[2])
			}
		}
		g.Weights = append(g.Weights, w)
	}
	var gs []group
	for _, n := range order {
		gs = append(gs, *byName[n])
	}
	if len(gs) == 0 {
		return nil, fmt.Errorf("%s: no groups", path)
	}
	return gs, nil
}

// inShard reports whether a group belongs to shard i of n (1-based): a hash
// of the name, so that the partition does not depend on which other groups
// exist or on the order they are listed in.
func inShard(name string, i, n int) bool {
	h := fnv.New64a()
	h.Write([]byte(name))
	return int(h.Sum64()%uint64(n)) == i-1
}

func parseShard(v string) (int, int, error) {
	var i, n int
	if _, err := fmt.Sscanf(v, "%d/%d", &i, &n); err != nil || n < 1 || i < 1 || i > n {
		return 0, 0, usagef("--shard: want i/n with 1 <= i <= n, got %q", v)
	}
	return i, n, nil
}

// groupReport is OUT/GROUP/report.json.
type groupReport struct {
	Group      string             `json:"group"`
	Status     string             `json:"status"`
	Message    string             `json:"message,omitempty"`
	Settings   map[string]any     `json:"settings"`
	Inputs     []batchInput       `json:"inputs"`
	Barycenter *report.Barycenter `json:"barycenter,omitempty"`
	Gaussian   *report.Gaussian   `json:"gaussian,omitempty"`
	Seconds    map[string]float64 `json:"seconds"`
	Outputs    []string           `json:"outputs"`
}

type batchInput struct {
	File   string  `json:"file"`
	SHA256 string  `json:"sha256"`
	Mass   float64 `json:"mass,omitempty"`
	Weight float64 `json:"weight"`
}

type summaryRow struct {
	Group      string
	Status     string
	Inputs     int
	Iterations int
	Seconds    float64
	Residual   float64
	Message    string
}

func checksum(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("%s: %v", path, unwrapErr(err))
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("%s: %v", path, err)
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

var groupOutputs = []string{"barycenter.npy", "barycenter.png", "pixel_mean.npy", "pixel_mean.png",
	"gauss_barycenter.npy", "gauss_barycenter.png", "contact_sheet.png", "convergence.png", "report.json"}

// upToDate tells whether OUT/GROUP holds a complete, successful result for
// exactly these inputs and settings.
func upToDate(dir string, inputs []batchInput, settings map[string]any) (*groupReport, bool) {
	data, err := os.ReadFile(filepath.Join(dir, "report.json"))
	if err != nil {
		return nil, false
	}
	var rep groupReport
	if json.Unmarshal(data, &rep) != nil || rep.Status != "ok" || len(rep.Inputs) != len(inputs) {
		return nil, false
	}
	for i := range inputs {
		if rep.Inputs[i].File != inputs[i].File || rep.Inputs[i].SHA256 != inputs[i].SHA256 || rep.Inputs[i].Weight != inputs[i].Weight {
			return nil, false
		}
	}
	a, _ := json.Marshal(rep.Settings)
	b, _ := json.Marshal(settings)
	if string(a) != string(b) {
		return nil, false
	}
	for _, o := range groupOutputs {
		if _, err := os.Stat(filepath.Join(dir, o)); err != nil {
			return nil, false
		}
	}
	return &rep, true
}

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
		groups []group
		err    error
	)
	switch {
	case c.String("manifest") != "":
		if c.NArg() != 0 {
			return usagef("batch: give IN_DIR or --manifest, not both")
		}
		groups, err = readManifest(c.String("manifest"))
	case c.NArg() == 1:
		groups, err = discoverGroups(c.Args().First())
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
		var keep []group
		for _, g := range groups {
			if inShard(g.Name, i, n) {
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
	release, err := lockOutput(out)
	if err != nil {
		return err
	}
	defer release()
	settings := map[string]any{"epsilon": s.Epsilon, "tol": s.Tol, "max_iter": s.MaxIter, "debias": s.Debias,
		"method": c.String("method"), "unbalanced": s.Unbalanced, "pixel_size": c.String("pixel-size"),
		"invert": ls.Invert, "background": c.String("background"), "mask": c.String("mask"),
		"relax": s.Relax, "drop_outside": s.DropOutside, "resample": c.String("resample"), "unit": ls.Unit}
	if p := c.String("mask"); p != "" {
		// The mask's contents, not only its name, decide the result.
		if settings["mask_sha256"], err = checksum(p); err != nil {
			return err
		}
	}

	jobs := c.Int("jobs")
	if jobs <= 0 {
		jobs = max(1, numCPU())
	}
	// Bound the parallel groups by a memory estimate: about 8 float64
	// buffers per input pixel plus the decoded inputs.
	var worst float64
	for _, g := range groups {
		worst = max(worst, float64(len(g.Files)))
	}
	if lim := c.Float64("memory") * (1 << 30); worst > 0 && lim > 0 {
		perGroup := worst * float64(c.Int("max-pixels")) * 8 * 9
		// max-pixels is a bound, not the size; use the first group's first
		// file header only when cheap: keep the simple bound, at least one job.
		if cfgPixels := firstPixels(groups); cfgPixels > 0 {
			perGroup = worst * float64(cfgPixels) * 8 * 9
		}
		jobs = max(1, min(jobs, int(lim/perGroup)))
	}
	workers := max(1, numCPU()/jobs)

	var bar *progressbar.ProgressBar
	quiet := c.Bool("quiet")
	if !quiet && isTerminal(os.Stderr) {
		bar = progressbar.NewOptions(len(groups), progressbar.OptionSetWriter(os.Stderr), progressbar.OptionSetDescription("groups"),
			progressbar.OptionShowCount(), progressbar.OptionClearOnFinish())
	}
	rows := make([]summaryRow, len(groups))
	var mu sync.Mutex
	logf := func(format string, args ...any) {
		if quiet {
			return
		}
		mu.Lock()
		defer mu.Unlock()
		if bar != nil {
			bar.Clear()
		}
		fmt.Fprintf(os.Stderr, format+"\n", args...)
		if bar != nil {
			bar.RenderBlank()
		}
	}
	parallel.For(len(groups), jobs, func(i int) {
		g := groups[i]
		ss := s
		ss.Workers = workers
		rows[i] = processGroup(g, groupJob{out: out, load: ls, resample: resample, solver: ss, settings: settings, force: c.Bool("force")})
		r := rows[i]
		switch r.Status {
		case "failed":
			logf("barygrid: group %s failed: %s", g.Name, r.Message)
		case "skipped":
			logf("group %s: up to date, skipped", g.Name)
		default:
			logf("group %s: %s, %d inputs, %d iterations, %.2fs", g.Name, r.Status, r.Inputs, r.Iterations, r.Seconds)
		}
		if bar != nil {
			mu.Lock()
			bar.Add(1)
			mu.Unlock()
		}
	})
	if err := writeSummary(filepath.Join(out, "summary.csv"), rows); err != nil {
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

// firstPixels reads the size of the first input of the first group, for
// the memory estimate (0 if it cannot).
func firstPixels(groups []group) int {
	if len(groups) == 0 || len(groups[0].Files) == 0 {
		return 0
	}
	f, err := fieldfile.Load(groups[0].Files[0], fieldfile.LoadSettings{SkipValidate: true})
	if err != nil {
		return 0
	}
	return f.Rows * f.Cols
}

func writeSummary(path string, rows []summaryRow) error {
	return fieldfile.WriteAtomic(path, true, func(w io.Writer) error {
		cw := csv.NewWriter(w)
		cw.Write([]string{"group", "status", "inputs", "iterations", "seconds", "residual", "message"})
		for _, r := range rows {
			cw.Write([]string{r.Group, r.Status, strconv.Itoa(r.Inputs), strconv.Itoa(r.Iterations),
				strconv.FormatFloat(r.Seconds, 'f', 3, 64), strconv.FormatFloat(r.Residual, 'g', 4, 64), r.Message})
		}
		cw.Flush()
		return cw.Error()
	})
}

// groupJob is what every group of a batch shares.
type groupJob struct {
	out      string
	load     fieldfile.LoadSettings
	resample [2]int // rows, cols; zero: off
	solver   sinkhorn.Settings
	settings map[string]any // every setting that changes a result (the resume key)
	force    bool
}

// processGroup computes one group into a temporary folder beside OUT/GROUP
// and renames it into place, so a failure leaves no partial output and an
// earlier complete result stays until the new one is whole.
func processGroup(g group, job groupJob) summaryRow {
	out, ls, s, settings, force := job.out, job.load, job.solver, job.settings, job.force
	row := summaryRow{Group: g.Name, Inputs: len(g.Files)}
	fail := func(err error) summaryRow {
		row.Status, row.Message = "failed", strings.ReplaceAll(err.Error(), "\n", "; ")
		return row
	}
	start := time.Now()
	inputs := make([]batchInput, len(g.Files))
	for i, f := range g.Files {
		sum, err := checksum(f)
		if err != nil {
			return fail(err)
		}
		w := 1.0
		if g.Weights != nil {
			w = g.Weights[i]
		}
		inputs[i] = batchInput{File: f, SHA256: sum, Weight: w}
	}
	final := filepath.Join(out, g.Name)
	if rep, ok := upToDate(final, inputs, settings); ok && !force {
		row.Status, row.Seconds = "skipped", rep.Seconds["total"]
		if rep.Barycenter != nil {
			row.Iterations, row.Residual = rep.Barycenter.Iterations, rep.Barycenter.Residual
		}
		return row
	}
	fs := make([]*grid.Field, len(g.Files))
	for i, f := range g.Files {
		var err error
		if fs[i], err = fieldfile.Load(f, ls); err != nil {
			return fail(err)
		}
		inputs[i].Mass = fs[i].Mass()
	}
	if err := resampleAll(fs, g.Files, job.resample); err != nil {
		return fail(err)
	}
	if err := grid.SameShape(fs, g.Files); err != nil {
		return fail(err)
	}
	s.Weights = g.Weights
	tBary := time.Now()
	r, err := sinkhorn.Barycenter(fs, s)
	if err != nil {
		return fail(err)
	}
	baryTime := time.Since(tBary).Seconds()
	row.Iterations, row.Residual = r.Iterations, r.Residual
	if r.Status != sinkhorn.Converged {
		return fail(fmt.Errorf("barycenter did not converge: %s", r.Message))
	}
	tGauss := time.Now()
	var gs []gaussfit.Gaussian
	var mass float64
	for i, f := range fs {
		gf, m, err := gaussfit.Fit(f, gaussfit.FitSettings{})
		if err != nil {
			return fail(fmt.Errorf("%s: %w", g.Files[i], err))
		}
		gs, mass = append(gs, gf), mass+m
	}
	gr, err := gaussfit.Barycenter(gs, gaussfit.Settings{Weights: g.Weights})
	if err != nil {
		return fail(err)
	}
	gaussTime := time.Since(tGauss).Seconds()
	dx, dy := fs[0].PixelSize()
	gfield := gaussfit.Render(gr.Barycenter, fs[0].Rows, fs[0].Cols, dx, dy, 1)
	mean, err := ensemble.PixelMean(fs)
	if err != nil {
		return fail(err)
	}

	tmp, err := os.MkdirTemp(out, "."+g.Name+".tmp")
	if err != nil {
		return fail(fmt.Errorf("%s: %v", out, unwrapErr(err)))
	}
	// MkdirTemp makes it private (0700); results are for colleagues too.
	if err := os.Chmod(tmp, 0o755); err != nil {
		return fail(fmt.Errorf("%s: %v", tmp, unwrapErr(err)))
	}
	defer os.RemoveAll(tmp) // no-op after a successful rename
	save := func(name string, f *grid.Field, color bool) error {
		_, err := saveFieldAs(filepath.Join(tmp, name), f, color, fieldfile.SaveSettings{Force: true})
		return err
	}
	for name, f := range map[string]*grid.Field{"barycenter": r.Barycenter, "pixel_mean": mean, "gauss_barycenter": gfield} {
		if err := save(name+".npy", f, false); err != nil {
			return fail(err)
		}
		if err := save(name+".png", f, true); err != nil {
			return fail(err)
		}
	}
	sheetImg := contactSheet(g.Name, g.Files, fs, mean, r.Barycenter, gs, gr.Barycenter)
	if err := fieldfile.WriteAtomic(filepath.Join(tmp, "contact_sheet.png"), true, func(w io.Writer) error { return png.Encode(w, sheetImg) }); err != nil {
		return fail(err)
	}
	err = fieldfile.WriteAtomic(filepath.Join(tmp, "convergence.png"), true, func(w io.Writer) error {
		return render.Convergence(w, r.Residuals, s.Tol, "group "+g.Name, 6*vg.Inch, 4*vg.Inch)
	})
	if err != nil {
		return fail(err)
	}
	br := report.NewBarycenter(g.Files, fs, g.Weights, s, r)
	br.Residuals = nil // in the plot; keeps the report readable
	gp := report.NewGaussian(gr, "fixed-point", len(gs))
	gp.MeanMass, gp.Objective = mass/float64(len(gs)), nil
	row.Status, row.Seconds = "ok", time.Since(start).Seconds()
	rep := groupReport{Group: g.Name, Status: "ok", Settings: settings, Inputs: inputs, Barycenter: &br, Gaussian: &gp,
		Seconds: map[string]float64{"barycenter": baryTime, "gaussian": gaussTime, "total": row.Seconds}, Outputs: groupOutputs}
	if err := report.WriteJSON(filepath.Join(tmp, "report.json"), true, rep); err != nil {
		return fail(err)
	}
	// Swap the complete folder into place.
	old := final + ".old"
	os.RemoveAll(old)
	if _, err := os.Stat(final); err == nil {
		if err := os.Rename(final, old); err != nil {
			return fail(fmt.Errorf("%s: %v", final, unwrapErr(err)))
		}
	}
	if err := os.Rename(tmp, final); err != nil {
		os.Rename(old, final)
		return fail(fmt.Errorf("%s: %v", final, unwrapErr(err)))
	}
	os.RemoveAll(old)
	return row
}

// contactSheet lays out the inputs, the pixel mean, the barycenter and the
// Gaussian ellipses over the pixel mean.
func contactSheet(name string, files []string, fs []*grid.Field, mean, bary *grid.Field, gs []gaussfit.Gaussian, gb gaussfit.Gaussian) *imageNRGBA {
	var tiles []render.Tile
	for i, f := range fs {
		tiles = append(tiles, render.FieldTile(filepath.Base(files[i]), f))
	}
	tiles = append(tiles, render.FieldTile("pixel mean", mean), render.FieldTile("barycenter", bary))
	bg, _ := render.Colorize(mean, imagefile.WriteSettings{})
	dx, dy := fs[0].PixelSize()
	zoom := max(1, 128/max(fs[0].Rows, fs[0].Cols))
	tiles = append(tiles, render.Tile{Label: "Gaussian ellipses", Image: render.Ellipses(bg, dx, dy, zoom, gs, gb)})
	return render.Contact(tiles, render.SheetSettings{Title: fmt.Sprintf("%s: %d inputs", name, len(fs))})
}
