package batch

import (
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
	"time"

	"barygrid/ensemble"
	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/io/imagefile"
	"barygrid/render"
	"barygrid/report"
	"barygrid/sinkhorn"

	"gonum.org/v1/plot/vg"
)

// Group is one unit of batch work: a name and its input files.
type Group struct {
	// Carry, when set, names a second field per input (same order), moved
	// along each input's plan into the template's frame and averaged there
	// (carried.npy, carried.png in the group's folder).
	Carry   []string
	Name    string
	Files   []string
	Weights []float64 // nil: equal
}

var fieldExt = map[string]bool{".png": true, ".jpg": true, ".jpeg": true, ".tif": true, ".tiff": true,
	".bmp": true, ".npy": true, ".csv": true, ".tsv": true, ".nc": true}

// Discover lists the subfolders of dir (sorted) with their field files.
func Discover(dir string) ([]Group, error) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("%s: %v", dir, pathCause(err))
	}
	var gs []Group
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			continue
		}
		// Stat follows symbolic links: a linked folder is a group too.
		st, err := os.Stat(filepath.Join(dir, e.Name()))
		if err != nil {
			continue
		}
		if !st.IsDir() {
			// A NetCDF file or a multi-page TIFF at the top is a stack: its
			// planes (members, times, z) are the group's inputs, named after
			// the file.
			p, ext := filepath.Join(dir, e.Name()), strings.ToLower(filepath.Ext(e.Name()))
			stack := ext == ".nc"
			if ext == ".tif" || ext == ".tiff" {
				if data, err := os.ReadFile(p); err == nil {
					stack = imagefile.TIFFPages(data) > 1
				}
			}
			if stack {
				gs = append(gs, Group{Name: strings.TrimSuffix(e.Name(), filepath.Ext(e.Name())), Files: []string{p}})
			}
			continue
		}
		files, err := os.ReadDir(filepath.Join(dir, e.Name()))
		if err != nil {
			return nil, fmt.Errorf("%s: %v", filepath.Join(dir, e.Name()), pathCause(err))
		}
		g := Group{Name: e.Name()}
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

// ReadManifest reads group,file[,weight] rows; relative files are taken
// from the manifest's folder.
func ReadManifest(path string) ([]Group, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("%s: %v", path, pathCause(err))
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.FieldsPerRecord = -1
	recs, err := r.ReadAll()
	if err != nil {
		return nil, fmt.Errorf("%s: %v", path, err)
	}
	byName := map[string]*Group{}
	var order []string
	// A header row names the columns: group, file, and optionally weight
	// and carry (a second field per input, carried into the template).
	col := map[string]int{"group": 0, "file": 1, "weight": 2, "carry": -1}
	for i, rec := range recs {
		if i == 0 && len(rec) >= 2 && rec[0] == "group" && rec[1] == "file" {
			col["weight"] = -1
			for j, name := range rec {
				col[strings.TrimSpace(name)] = j
			}
			continue
		}
		if len(rec) < 2 || len(rec) > 4 || rec[0] == "" || rec[1] == "" {
			return nil, fmt.Errorf("%s: line %d: want group,file[,weight][,carry]", path, i+1)
		}
		if strings.ContainsAny(rec[0], `/\`) || rec[0] == "." || rec[0] == ".." {
			return nil, fmt.Errorf("%s: line %d: group name %q is not a folder name", path, i+1, rec[0])
		}
		g := byName[rec[0]]
		if g == nil {
			g = &Group{Name: rec[0]}
			byName[rec[0]] = g
			order = append(order, rec[0])
		}
		file := rec[1]
		if !filepath.IsAbs(file) {
			file = filepath.Join(filepath.Dir(path), file)
		}
		g.Files = append(g.Files, file)
		w := 1.0
		if j := col["weight"]; j >= 0 && j < len(rec) && rec[j] != "" {
			if w, err = strconv.ParseFloat(rec[j], 64); err != nil || !(w >= 0) {
				return nil, fmt.Errorf("%s: line %d: weight %q is not a non-negative number", path, i+1, rec[j])
			}
		}
		g.Weights = append(g.Weights, w)
		if j := col["carry"]; j >= 0 {
			if j >= len(rec) || rec[j] == "" {
				return nil, fmt.Errorf("%s: line %d: the carry column is empty", path, i+1)
			}
			c := rec[j]
			if !filepath.IsAbs(c) {
				c = filepath.Join(filepath.Dir(path), c)
			}
			g.Carry = append(g.Carry, c)
		}
	}
	var gs []Group
	for _, n := range order {
		gs = append(gs, *byName[n])
	}
	if len(gs) == 0 {
		return nil, fmt.Errorf("%s: no groups", path)
	}
	return gs, nil
}

// InShard reports whether a group belongs to shard i of n (1-based): a hash
// of the name, so that the partition does not depend on which other groups
// exist or on the order they are listed in.
func InShard(name string, i, n int) bool {
	h := fnv.New64a()
	h.Write([]byte(name))
	return int(h.Sum64()%uint64(n)) == i-1
}

// Report is OUT/GROUP/report.json.
type Report struct {
	Group      string             `json:"group"`
	Status     string             `json:"status"`
	Message    string             `json:"message,omitempty"`
	Settings   map[string]any     `json:"settings"`
	Inputs     []Input            `json:"inputs"`
	Barycenter *report.Barycenter `json:"barycenter,omitempty"`
	Gaussian   *report.Gaussian   `json:"gaussian,omitempty"`
	Seconds    map[string]float64 `json:"seconds"`
	Outputs    []string           `json:"outputs"`
}

type Input struct {
	File   string  `json:"file"`
	SHA256 string  `json:"sha256"`
	Mass   float64 `json:"mass,omitempty"`
	Weight float64 `json:"weight_given"` // as the manifest gives it; report.Input.Weight is normalised
	// Role is "carry" for a carried field (its checksum is part of the
	// resume key too), empty for an input.
	Role string `json:"role,omitempty"`
}

type Row struct {
	Group      string
	Status     string
	Inputs     int
	Iterations int
	Seconds    float64
	Residual   float64
	Message    string
}

func Checksum(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("%s: %v", path, pathCause(err))
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("%s: %v", path, err)
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

var Outputs = []string{"barycenter.npy", "barycenter.png", "pixel_mean.npy", "pixel_mean.png",
	"gauss_barycenter.npy", "gauss_barycenter.png", "contact_sheet.png", "convergence.png", "report.json"}

// UpToDate tells whether OUT/GROUP holds a complete, successful result for
// exactly these inputs and settings.
func UpToDate(dir string, inputs []Input, settings map[string]any) (*Report, bool) {
	data, err := os.ReadFile(filepath.Join(dir, "report.json"))
	if err != nil {
		return nil, false
	}
	var rep Report
	if json.Unmarshal(data, &rep) != nil || rep.Status != "ok" || len(rep.Inputs) != len(inputs) {
		return nil, false
	}
	for i := range inputs {
		if rep.Inputs[i] != (Input{File: inputs[i].File, SHA256: inputs[i].SHA256, Mass: rep.Inputs[i].Mass, Weight: inputs[i].Weight, Role: inputs[i].Role}) {
			return nil, false
		}
	}
	a, _ := json.Marshal(rep.Settings)
	b, _ := json.Marshal(settings)
	if string(a) != string(b) {
		return nil, false
	}
	for _, o := range Outputs {
		if _, err := os.Stat(filepath.Join(dir, o)); err != nil {
			return nil, false
		}
	}
	return &rep, true
}

// firstPixels reads the size of the first input of the first group, for
// the memory estimate (0 if it cannot).
func firstPixels(groups []Group) int {
	if len(groups) == 0 || len(groups[0].Files) == 0 {
		return 0
	}
	f, err := fieldfile.Load(groups[0].Files[0], fieldfile.LoadSettings{SkipValidate: true})
	if err != nil {
		return 0
	}
	return f.Rows * f.Cols
}

func WriteSummary(path string, rows []Row) error {
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

// Job is what every group of a batch shares.
type Job struct {
	// Out is the output folder; each group goes to Out/GROUP.
	Out string
	// Load reads the inputs (pixel size, unit, preprocessing).
	Load fieldfile.LoadSettings
	// Resample, when non-zero, resamples every input to rows x cols
	// (grid.Resample: the physical extent is kept).
	Resample [2]int
	// Solver settings of the barycenter; Weights come from the group.
	Solver sinkhorn.Settings
	// Key holds every setting that changes a result; a group whose report
	// has the same key and inputs is up to date (see UpToDate).
	Key map[string]any
	// Force recomputes groups that are up to date.
	Force bool
}

// Process computes one group into a temporary folder beside OUT/GROUP
// and renames it into place, so a failure leaves no partial output and an
// earlier complete result stays until the new one is whole.
func Process(g Group, job Job) Row {
	out, ls, s, settings, force := job.Out, job.Load, job.Solver, job.Key, job.Force
	row := Row{Group: g.Name, Inputs: len(g.Files)} // planes, once read
	fail := func(err error) Row {
		row.Status, row.Message = "failed", strings.ReplaceAll(err.Error(), "\n", "; ")
		return row
	}
	start := time.Now()
	inputs := make([]Input, len(g.Files))
	for i, f := range g.Files {
		sum, err := Checksum(f)
		if err != nil {
			return fail(err)
		}
		w := 1.0
		if g.Weights != nil {
			w = g.Weights[i]
		}
		inputs[i] = Input{File: f, SHA256: sum, Weight: w}
	}
	for _, f := range g.Carry {
		sum, err := Checksum(f)
		if err != nil {
			return fail(err)
		}
		inputs = append(inputs, Input{File: f, SHA256: sum, Role: "carry"})
	}
	final := filepath.Join(out, g.Name)
	if rep, ok := UpToDate(final, inputs, settings); ok && !force {
		row.Status, row.Seconds = "skipped", rep.Seconds["total"]
		if rep.Barycenter != nil {
			row.Iterations, row.Residual = rep.Barycenter.Iterations, rep.Barycenter.Residual
		}
		return row
	}
	// Every plane of a stack (a NetCDF variable with leading dimensions)
	// is an input of its own; labels name them.
	var fs []*grid.Field
	var labels []string
	for i, f := range g.Files {
		planes, names, err := fieldfile.LoadPlanes(f, ls)
		if err != nil {
			return fail(err)
		}
		for _, p := range planes {
			inputs[i].Mass += p.Mass()
		}
		fs, labels = append(fs, planes...), append(labels, names...)
	}
	row.Inputs = len(fs)
	if g.Weights != nil && len(fs) != len(g.Files) {
		return fail(fmt.Errorf("weights are given per file, but the files hold %d planes", len(fs)))
	}
	if job.Resample[0] > 0 {
		for i, f := range fs {
			r, err := grid.Resample(f, job.Resample[0], job.Resample[1])
			if err != nil {
				return fail(fmt.Errorf("%s: %w", labels[i], err))
			}
			fs[i] = r
		}
	}
	if err := grid.SameShape(fs, labels); err != nil {
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
	var carried *grid.Field
	if g.Carry != nil {
		if len(g.Carry) != len(fs) {
			return fail(fmt.Errorf("%d carried files for %d inputs", len(g.Carry), len(fs)))
		}
		cs := make([]*grid.Field, len(g.Carry))
		for i, p := range g.Carry {
			if cs[i], err = fieldfile.Load(p, ls); err != nil {
				return fail(err)
			}
		}
		if carried, err = sinkhorn.Carry(fs, cs, s, r); err != nil {
			return fail(err)
		}
	}
	tGauss := time.Now()
	var gs []gaussfit.Gaussian
	var mass float64
	for i, f := range fs {
		gf, m, err := gaussfit.Fit(f, gaussfit.FitSettings{})
		if err != nil {
			return fail(fmt.Errorf("%s: %w", labels[i], err))
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
		return fail(fmt.Errorf("%s: %v", out, pathCause(err)))
	}
	// MkdirTemp makes it private (0700); results are for colleagues too.
	if err := os.Chmod(tmp, 0o755); err != nil {
		return fail(fmt.Errorf("%s: %v", tmp, pathCause(err)))
	}
	defer os.RemoveAll(tmp) // no-op after a successful rename
	save := func(name string, f *grid.Field, color bool) error {
		if color {
			im, _ := render.Colorize(f, imagefile.WriteSettings{})
			return fieldfile.SaveImage(filepath.Join(tmp, name), im, true)
		}
		_, err := fieldfile.Save(filepath.Join(tmp, name), f, fieldfile.SaveSettings{Force: true})
		return err
	}
	outs := map[string]*grid.Field{"barycenter": r.Barycenter, "pixel_mean": mean, "gauss_barycenter": gfield}
	if carried != nil {
		outs["carried"] = carried
	}
	for name, f := range outs {
		if err := save(name+".npy", f, false); err != nil {
			return fail(err)
		}
		if err := save(name+".png", f, true); err != nil {
			return fail(err)
		}
	}
	sheetImg := render.Summary(g.Name, baseNames(labels), fs, mean, r.Barycenter, gs, gr.Barycenter)
	if err := fieldfile.WriteAtomic(filepath.Join(tmp, "contact_sheet.png"), true, func(w io.Writer) error { return png.Encode(w, sheetImg) }); err != nil {
		return fail(err)
	}
	err = fieldfile.WriteAtomic(filepath.Join(tmp, "convergence.png"), true, func(w io.Writer) error {
		return render.Convergence(w, r.Residuals, s.Tol, "group "+g.Name, 6*vg.Inch, 4*vg.Inch)
	})
	if err != nil {
		return fail(err)
	}
	br := report.NewBarycenter(labels, fs, g.Weights, s, r)
	br.Residuals = nil // in the plot; keeps the report readable
	gp := report.NewGaussian(gr, "fixed-point", len(gs))
	gp.MeanMass, gp.Objective = mass/float64(len(gs)), nil
	row.Status, row.Seconds = "ok", time.Since(start).Seconds()
	rep := Report{Group: g.Name, Status: "ok", Settings: settings, Inputs: inputs, Barycenter: &br, Gaussian: &gp,
		Seconds: map[string]float64{"barycenter": baryTime, "gaussian": gaussTime, "total": row.Seconds}, Outputs: Outputs}
	if carried != nil {
		rep.Outputs = append(append([]string(nil), Outputs...), "carried.npy", "carried.png")
		rep.Barycenter.CarryOutput = "carried.npy"
	}
	if err := report.WriteJSON(filepath.Join(tmp, "report.json"), true, rep); err != nil {
		return fail(err)
	}
	// Swap the complete folder into place.
	old := final + ".old"
	os.RemoveAll(old)
	if _, err := os.Stat(final); err == nil {
		if err := os.Rename(final, old); err != nil {
			return fail(fmt.Errorf("%s: %v", final, pathCause(err)))
		}
	}
	if err := os.Rename(tmp, final); err != nil {
		os.Rename(old, final)
		return fail(fmt.Errorf("%s: %v", final, pathCause(err)))
	}
	os.RemoveAll(old)
	return row
}

// pathCause strips the operation and path from an os error: messages name
// the file themselves.
func pathCause(err error) error {
	if pe, ok := err.(*os.PathError); ok {
		return pe.Err
	}
	return err
}

func baseNames(files []string) []string {
	out := make([]string, len(files))
	for i, f := range files {
		out[i] = filepath.Base(f)
	}
	return out
}
