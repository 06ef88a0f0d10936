package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"barygrid/grid"
	"barygrid/io/fieldfile"
)

// batch honours --resample: the group is computed on the requested grid
// (resampling keeps the physical extent, so the pixel size grows), as the
// barycenter command does.
func TestBatchResamples(t *testing.T) {
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in"), filepath.Join(dir, "out")
	os.MkdirAll(filepath.Join(in, "g"), 0o755)
	fieldfile.Save(filepath.Join(in, "g", "a.npy"), blob(24, 24, 8, 9, 3), fieldfile.SaveSettings{})
	fieldfile.Save(filepath.Join(in, "g", "b.npy"), blob(24, 24, 12, 12, 4), fieldfile.SaveSettings{})
	code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--resample", "20x20", "--out", out, in)
	if code != 0 {
		t.Fatalf("exit %d: %s %v", code, errs, readSummary(t, filepath.Join(out, "summary.csv"))["g"])
	}
	b, err := fieldfile.Load(filepath.Join(out, "g", "barycenter.npy"), fieldfile.LoadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if b.Rows != 20 || b.Cols != 20 {
		t.Fatalf("barycenter is %dx%d, want the resampled 20x20", b.Rows, b.Cols)
	}
}

// The resume key covers every setting that changes the result: a rerun with
// another over-relaxation, with --drop-outside, or with a mask whose contents
// changed recomputes the group instead of skipping it as up to date.
func TestBatchResumeKeyCoversSettings(t *testing.T) {
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in"), filepath.Join(dir, "out")
	makeGroups(t, in, "g")
	mask := filepath.Join(dir, "mask.npy")
	m := grid.New(20, 20)
	for i := range m.Data {
		m.Data[i] = 1
	}
	fieldfile.Save(mask, m, fieldfile.SaveSettings{})
	base := []string{"batch", "--epsilon", "2", "--quiet", "--mask", mask, "--out", out}
	status := func(extra ...string) string {
		t.Helper()
		code, _, errs := runCLI(t, append(append(append([]string{}, base...), extra...), in)...)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		return readSummary(t, filepath.Join(out, "summary.csv"))["g"][1]
	}
	if s := status(); s != "ok" {
		t.Fatalf("first run %s", s)
	}
	if s := status(); s != "skipped" {
		t.Fatalf("unchanged rerun %s, want skipped", s)
	}
	if s := status("--relax", "1.5"); s != "ok" {
		t.Errorf("rerun with --relax 1.5: %s, want recomputed", s)
	}
	if s := status("--relax", "1.5", "--drop-outside"); s != "ok" {
		t.Errorf("rerun with --drop-outside: %s, want recomputed", s)
	}
	m.Data[0] = 0 // same file name, other contents
	fieldfile.Save(mask, m, fieldfile.SaveSettings{Force: true})
	if s := status("--relax", "1.5", "--drop-outside"); s != "ok" {
		t.Errorf("rerun with a changed mask: %s, want recomputed", s)
	}
}

// Group folders are readable by colleagues (not 0700), and a group given as
// a symbolic link to a folder is found like any other.
func TestBatchFolderModeAndLinks(t *testing.T) {
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in"), filepath.Join(dir, "out")
	makeGroups(t, in, "g1")
	makeGroups(t, filepath.Join(dir, "elsewhere"), "g2")
	if err := os.Symlink(filepath.Join(dir, "elsewhere", "g2"), filepath.Join(in, "g2")); err != nil {
		t.Skip("no symbolic links here:", err)
	}
	code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--out", out, in)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, g := range []string{"g1", "g2"} {
		st, err := os.Stat(filepath.Join(out, g))
		if err != nil {
			t.Fatalf("group %s: %v", g, err)
		}
		if st.Mode().Perm()&0o055 != 0o055 {
			t.Errorf("group %s folder mode %v, want readable by group and others", g, st.Mode().Perm())
		}
	}
}

// Two batch runs on one output folder do not both compute: the second
// refuses with a one-line error naming the process that holds the folder,
// and a finished run leaves no lock behind.
func TestBatchLocksOutput(t *testing.T) {
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in"), filepath.Join(dir, "out")
	makeGroups(t, in, "g")
	if code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--out", out, in); code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	lock := filepath.Join(out, ".barygrid-batch.lock")
	if _, err := os.Stat(lock); err == nil {
		t.Fatal("a finished run left its lock")
	}
	// A live holder: this test process.
	os.WriteFile(lock, []byte(strconv.Itoa(os.Getpid())+"\n"), 0o644)
	code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--force", "--out", out, in)
	if code != 1 || !strings.Contains(errs, strconv.Itoa(os.Getpid())) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
		t.Errorf("exit %d, stderr %q: want 1 and one line naming process %d", code, errs, os.Getpid())
	}
	// A holder that is gone: the lock is stale and taken over.
	os.WriteFile(lock, []byte("999999999\n"), 0o644)
	if code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--out", out, in); code != 0 {
		t.Errorf("stale lock: exit %d: %s", code, errs)
	}
}

// Help shows a computed default in words, never "(default: 0)".
func TestHelpShowsNoZeroDefaults(t *testing.T) {
	for _, cmd := range []string{"barycenter", "batch", "morph", "distance", "gauss"} {
		_, out, errs := runCLI(t, cmd, "--help")
		if strings.Contains(out+errs, "(default: 0)") {
			t.Errorf("%s --help shows (default: 0)", cmd)
		}
	}
}

// --maps writes each input's displacement (rows x cols x 2) and the
// variability map, and the report carries the spread: for translates by
// (0, 0), (6, 2) and (3, 6) px the variance of the shifts, 12.2 px^2
// (standard fact: the barycentric map of translates is the translation).
func TestBarycenterMaps(t *testing.T) {
	dir := t.TempDir()
	files := writeBlobs(t, dir)
	maps, rep := filepath.Join(dir, "maps"), filepath.Join(dir, "r.json")
	code, _, errs := runCLI(t, append([]string{"barycenter", "--epsilon", "0.25", "--tol", "1e-9", "--maps", maps, "--report", rep}, files...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, f := range []string{"b1.displacement.npy", "b1.displacement.png", "b3.displacement.npy", "variability.npy", "variability.png"} {
		if st, err := os.Stat(filepath.Join(maps, f)); err != nil || st.Size() == 0 {
			t.Errorf("%s: %v", f, err)
		}
	}
	data, _ := os.ReadFile(filepath.Join(maps, "b2.displacement.npy"))
	if !strings.Contains(string(data[:128]), "'shape': (24, 24, 2)") {
		t.Errorf("displacement header %q", data[:80])
	}
	var r struct {
		Spread float64 `json:"spread"`
	}
	raw, _ := os.ReadFile(rep)
	if err := json.Unmarshal(raw, &r); err != nil {
		t.Fatal(err)
	}
	// Centroids (8,10), (14,12), (11,16): mean (11, 12.667); variance
	// (9 + 9 + 0)/3 + (7.111 + 0.444 + 11.111)/3 = 6 + 6.222.
	if want := 6 + 56.0/9; math.Abs(r.Spread-want) > 0.02*want {
		t.Errorf("spread %g, want %g", r.Spread, want)
	}
}

// gauss --stream averages JSON-line fits: sampled (one pass, constant
// memory) lands near the fixed point on the same stream, and standard input
// cannot be read twice.
func TestGaussStream(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "fits.jsonl")
	var b strings.Builder
	for i := 0; i < 400; i++ {
		a := 1 + float64(i%7)/3
		fmt.Fprintf(&b, "{\"mean\": [%g, %g], \"cov\": [[%g, 0.2], [0.2, %g]]}\n", float64(i%5), float64(i%3), a, 3-a/2)
	}
	os.WriteFile(p, []byte(b.String()), 0o644)
	get := func(alg string) []float64 {
		t.Helper()
		out := filepath.Join(dir, alg+".json")
		code, _, errs := runCLI(t, "gauss", "--stream", p, "--algorithm", alg, "--params", out)
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", alg, code, errs)
		}
		var r struct {
			Mean []float64   `json:"mean"`
			Cov  [][]float64 `json:"covariance"`
		}
		raw, _ := os.ReadFile(out)
		json.Unmarshal(raw, &r)
		return []float64{r.Mean[0], r.Mean[1], r.Cov[0][0], r.Cov[0][1], r.Cov[1][1]}
	}
	fp, sa := get("fixed-point"), get("sampled")
	for i := range fp {
		if math.Abs(fp[i]-sa[i]) > 0.01 {
			t.Errorf("entry %d: sampled %g, fixed point %g", i, sa[i], fp[i])
		}
	}
	if code, _, errs := runCLI(t, "gauss", "--stream", "-", "--algorithm", "sampled", "--passes", "2"); code != 2 {
		t.Errorf("two passes over standard input: exit %d (%s), want 2", code, errs)
	}
}

// --carry moves each input's second field along its plan and averages it:
// for shifted copies of one pair the result is the pair's second field
// shifted by the mean shift (see sinkhorn.TestCarryShiftedPair).
func TestBarycenterCarry(t *testing.T) {
	dir := t.TempDir()
	var files, carry []string
	for i, s := range [][2]float64{{0, 0}, {6, 2}, {3, 4}} {
		a, b := filepath.Join(dir, fmt.Sprintf("n%d.npy", i)), filepath.Join(dir, fmt.Sprintf("p%d.npy", i))
		fieldfile.Save(a, blob(30, 30, 10+s[0], 12+s[1], 6), fieldfile.SaveSettings{})
		fieldfile.Save(b, blob(30, 30, 12+s[0], 12+s[1], 2), fieldfile.SaveSettings{})
		files, carry = append(files, a), append(carry, b)
	}
	out := filepath.Join(dir, "carried.npy")
	code, _, errs := runCLI(t, append([]string{"barycenter", "--epsilon", "0.25", "--carry", strings.Join(carry, ","), "--carry-out", out}, files...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	f, err := fieldfile.Load(out, fieldfile.LoadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	m := grid.ComputeMoments(f)
	if math.Abs(m.Mean[0]-15) > 0.1 || math.Abs(m.Mean[1]-14) > 0.1 {
		t.Errorf("carried centroid %v, want (15, 14)", m.Mean)
	}
	if code, _, _ := runCLI(t, append([]string{"barycenter", "--carry", carry[0], "--carry-out", out + "2"}, files...)...); code != 2 {
		t.Errorf("one carried file for three inputs: exit %d, want 2", code)
	}
}

// --pose rotate: elongated blobs at several angles give an elongated
// template (not the round blur of averaging them as they lie), and the
// report lists each input's angle.
func TestBarycenterPose(t *testing.T) {
	dir := t.TempDir()
	var files []string
	for i, a := range []float64{0, 50, 100, 150} {
		f := grid.New(40, 40)
		th := a * math.Pi / 180
		for r := 0; r < 40; r++ {
			for q := 0; q < 40; q++ {
				u, v := float64(q)-20, -(float64(r) - 20)
				u0, v0 := math.Cos(th)*u+math.Sin(th)*v, -math.Sin(th)*u+math.Cos(th)*v
				f.Set(r, q, math.Exp(-u0*u0/(2*25)-v0*v0/(2*3)))
			}
		}
		p := filepath.Join(dir, fmt.Sprintf("c%d.npy", i))
		fieldfile.Save(p, f, fieldfile.SaveSettings{})
		files = append(files, p)
	}
	elong := func(args ...string) (float64, []byte) {
		out, rep := filepath.Join(dir, "t.npy"), filepath.Join(dir, "r.json")
		code, _, errs := runCLI(t, append(append([]string{"barycenter", "--force", "--out", out, "--report", rep}, args...), files...)...)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		f, _ := fieldfile.Load(out, fieldfile.LoadSettings{})
		m := grid.ComputeMoments(f)
		tr, det := m.Cov[0][0]+m.Cov[1][1], m.Cov[0][0]*m.Cov[1][1]-m.Cov[0][1]*m.Cov[1][0]
		l1 := tr/2 + math.Sqrt(tr*tr/4-det)
		l2 := tr/2 - math.Sqrt(tr*tr/4-det)
		raw, _ := os.ReadFile(rep)
		return l1 / l2, raw
	}
	posed, raw := elong("--pose", "rotate")
	plain, _ := elong()
	t.Logf("variance ratio of the template: posed %.2f, as they lie %.2f (the shape's 25/3.5 with the blur)", posed, plain)
	if posed < 5 || plain > 2 {
		t.Errorf("variance ratio posed %.2f, unposed %.2f", posed, plain)
	}
	if !strings.Contains(string(raw), `"angle_deg"`) || !strings.Contains(string(raw), `"pose_mode": "rotate"`) {
		t.Errorf("report lacks the pose: %s", raw[:200])
	}
}

// inspect --json states the pixel size and where it came from: the file's
// OME-XML (written by Python's imaging library), or the flag, with a note
// of what the flag replaced.
func TestInspectPixelSizeSource(t *testing.T) {
	ome := filepath.Join("..", "..", "testdata", "pil_ome.tif")
	for _, c := range []struct {
		args   []string
		source string
		dx     float64
		note   bool
	}{
		{nil, "ome", 0.65, false},
		{[]string{"--pixel-size", "0.5", "--unit", "um"}, "flag", 0.5, true},
	} {
		code, out, errs := runCLI(t, append(append([]string{"inspect", "--json"}, c.args...), ome)...)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		var rows []struct {
			PixelSize [2]float64 `json:"pixel_size"`
			Unit      string     `json:"unit"`
			Source    string     `json:"pixel_size_source"`
			Note      string     `json:"note"`
		}
		if err := json.Unmarshal([]byte(out), &rows); err != nil || len(rows) != 1 {
			t.Fatalf("%v %s", err, out)
		}
		r := rows[0]
		if r.Source != c.source || r.PixelSize[0] != c.dx || r.Unit != "um" || (r.Note != "") != c.note {
			t.Errorf("%v: %+v", c.args, r)
		}
	}
}

// NetCDF (fixtures written by SciPy and ncgen): a variable with a leading
// dimension is a stack whose planes are the inputs, --index picks a plane,
// and a NetCDF-4 file is refused with the conversion command.
func TestNetCDFInputs(t *testing.T) {
	nc := filepath.Join("..", "..", "testdata", "nc_cdf1.nc")
	rep := filepath.Join(t.TempDir(), "r.json")
	code, _, errs := runCLI(t, "barycenter", "--epsilon", "2", "--report", rep, nc)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	raw, _ := os.ReadFile(rep)
	if !strings.Contains(string(raw), "nc_cdf1.nc[time=1]") || !strings.Contains(string(raw), `"unit": "km"`) {
		t.Errorf("report: %s", raw[:300])
	}
	code, out, errs := runCLI(t, "inspect", "--json", "--variable", "rain", "--index", "time=1", nc)
	if code != 0 || !strings.Contains(out, `"pixel_size_source": "netcdf-coordinates"`) || !strings.Contains(out, `"max": 10.5`) {
		t.Errorf("inspect: exit %d %s %s", code, out, errs)
	}
	// A latitude-longitude grid (ncgen, 1 by 1 degree around 60 N) is
	// converted to km, and the command says so: the cost would otherwise
	// be in degrees. 1 degree of latitude = 6371 pi / 180 = 111.19 km
	// (mean Earth radius, standard), of longitude cos 60 of that.
	ll := filepath.Join("..", "..", "testdata", "nc_latlon.nc")
	code, _, errs = runCLI(t, "barycenter", "--out", filepath.Join(t.TempDir(), "ll.npy"), ll, ll)
	if code != 0 || !strings.Contains(errs, "converted to km at latitude 60") || !strings.Contains(errs, "--degrees") {
		t.Errorf("latitude-longitude: exit %d, %q", code, errs)
	}
	code, out, _ = runCLI(t, "inspect", "--json", ll)
	if code != 0 || !strings.Contains(out, `"note": "latitude-longitude degrees converted to km at latitude 60"`) || !strings.Contains(out, "111.19") {
		t.Errorf("inspect latitude-longitude: %s", out)
	}
	code, _, errs = runCLI(t, "inspect", filepath.Join("..", "..", "testdata", "nc_netcdf4.nc"))
	if code != 1 || !strings.Contains(errs, "nccopy") || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
		t.Errorf("NetCDF-4: exit %d, %q", code, errs)
	}
}

// A multi-page TIFF (written by Python's imaging library) is a stack whose
// pages are the inputs; --index page=I picks one (page 1: the ramp 37 r +
// 11 c plus 50, largest 205).
func TestTIFFStack(t *testing.T) {
	stack := filepath.Join("..", "..", "testdata", "pil_stack.tif")
	rep := filepath.Join(t.TempDir(), "r.json")
	if code, _, errs := runCLI(t, "barycenter", "--epsilon", "1", "--report", rep, stack); code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	raw, _ := os.ReadFile(rep)
	if !strings.Contains(string(raw), "pil_stack.tif[page=2]") {
		t.Errorf("report: %.300s", raw)
	}
	code, out, errs := runCLI(t, "inspect", "--json", "--index", "page=1", stack)
	if code != 0 || !strings.Contains(out, `"max": 205`) {
		t.Errorf("inspect page 1: exit %d %s %s", code, out, errs)
	}
}
