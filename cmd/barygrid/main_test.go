package main

import (
	"encoding/csv"
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
	"barygrid/sinkhorn"
)

// runCLI runs the command line with stdout and stderr captured.
func runCLI(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	dir := t.TempDir()
	o, _ := os.Create(filepath.Join(dir, "out"))
	e, _ := os.Create(filepath.Join(dir, "err"))
	so, se := os.Stdout, os.Stderr
	os.Stdout, os.Stderr = o, e
	code := run(append([]string{"barygrid"}, args...))
	os.Stdout, os.Stderr = so, se
	o.Close()
	e.Close()
	out, _ := os.ReadFile(filepath.Join(dir, "out"))
	errb, _ := os.ReadFile(filepath.Join(dir, "err"))
	return code, string(out), string(errb)
}

func blob(rows, cols int, mx, my, s2 float64) *grid.Field {
	f := grid.New(rows, cols)
	for r := 0; r < rows; r++ {
		for c := 0; c < cols; c++ {
			x, y := float64(c)-mx, float64(r)-my
			f.Set(r, c, 1000*math.Exp(-(x*x+y*y)/(2*s2)))
		}
	}
	return f
}

func writeBlobs(t *testing.T, dir string) []string {
	var files []string
	for i, m := range [][2]float64{{8, 10}, {14, 12}, {11, 16}} {
		p := filepath.Join(dir, "b"+string(rune('1'+i))+".npy")
		if _, err := fieldfile.Save(p, blob(24, 24, m[0], m[1], 4), fieldfile.SaveSettings{}); err != nil {
			t.Fatal(err)
		}
		files = append(files, p)
	}
	return files
}

func TestInspectJSON(t *testing.T) {
	dir := t.TempDir()
	files := writeBlobs(t, dir)
	code, out, errs := runCLI(t, append([]string{"inspect", "--json", "--pixel-size", "0.5"}, files...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var rows []map[string]any
	if err := json.Unmarshal([]byte(out), &rows); err != nil || len(rows) != 3 {
		t.Fatalf("bad JSON %v: %s", err, out)
	}
	for _, k := range []string{"file", "rows", "cols", "mass", "centroid", "covariance"} {
		if _, ok := rows[0][k]; !ok {
			t.Errorf("missing %q", k)
		}
	}
	c := rows[0]["centroid"].([]any)
	if x := c[0].(float64); math.Abs(x-4) > 1e-3 { // 8 px * 0.5, blob 4 sigma from the edge
		t.Errorf("centroid x %g, want 4", x)
	}
}

func TestBarycenterCommand(t *testing.T) {
	dir := t.TempDir()
	files := writeBlobs(t, dir)
	out, rep := filepath.Join(dir, "bary.npy"), filepath.Join(dir, "rep.json")
	args := append([]string{"barycenter", "--epsilon", "2", "--out", out, "--report", rep}, files...)
	code, stdout, errs := runCLI(t, args...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(stdout, "converged") {
		t.Errorf("stdout: %s", stdout)
	}
	data, _ := os.ReadFile(rep)
	var r map[string]any
	if err := json.Unmarshal(data, &r); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"iterations", "residual", "seconds", "epsilon", "converged", "debiased", "inputs"} {
		if _, ok := r[k]; !ok {
			t.Errorf("report lacks %q", k)
		}
	}
	f, err := fieldfile.Load(out, fieldfile.LoadSettings{})
	if err != nil || math.Abs(f.Mass()-1) > 1e-9 {
		t.Fatalf("output %v mass %v", err, f)
	}
	// A second run without --force must refuse and leave the file alone.
	before, _ := os.ReadFile(out)
	code, _, errs = runCLI(t, args...)
	if code != 1 || !strings.Contains(errs, "exists") {
		t.Errorf("rerun: exit %d, %q", code, errs)
	}
	after, _ := os.ReadFile(out)
	if string(before) != string(after) {
		t.Error("output changed without --force")
	}
}

func TestErrorsAndExitCodes(t *testing.T) {
	dir := t.TempDir()
	files := writeBlobs(t, dir)
	bad := filepath.Join(dir, "bad.csv")
	os.WriteFile(bad, []byte("1,2\n3\n"), 0o644)
	out := filepath.Join(dir, "never.npy")
	cases := []struct {
		args []string
		code int
		want string
	}{
		{[]string{"barycenter", "--out", out, files[0], bad}, 1, bad + ": csvgrid: line 2"},
		{[]string{"barycenter", "--out", out, files[0], filepath.Join(dir, "missing.png")}, 1, "missing.png: no such file"},
		{[]string{"barycenter", "--weights", "1,2", "--out", out, files[0], files[1], files[2]}, 2, "2 weights for 3 inputs"},
		{[]string{"barycenter", "--no-such-flag", files[0]}, 2, "no-such-flag"},
		{[]string{"barycenter", "--epsilon", "-1", files[0]}, 2, "--epsilon must be positive"},
		{[]string{"frobnicate"}, 2, "frobnicate"},
		{[]string{"gauss", "--algorithm", "newton", files[0]}, 2, "--algorithm"},
	}
	for _, tc := range cases {
		code, _, errs := runCLI(t, tc.args...)
		if code != tc.code || !strings.Contains(errs, tc.want) {
			t.Errorf("%v: exit %d, stderr %q; want %d and %q", tc.args, code, errs, tc.code, tc.want)
		}
		if strings.Count(strings.TrimSpace(errs), "\n") > 0 && tc.code == 1 {
			t.Errorf("%v: error spans several lines: %q", tc.args, errs)
		}
		if _, err := os.Stat(out); err == nil {
			t.Fatalf("%v: output written despite the error", tc.args)
		}
	}
}

func TestGaussCommandJSONInput(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "g.json")
	os.WriteFile(in, []byte(`{"gaussians": [
		{"mean": [0, 0, 0], "covariance": [[4, 0, 0], [0, 1, 0], [0, 0, 9]]},
		{"mean": [2, 2, 2], "covariance": [[16, 0, 0], [0, 9, 0], [0, 0, 1]], "weight": 3}]}`), 0o644)
	params := filepath.Join(dir, "p.json")
	code, _, errs := runCLI(t, "gauss", "--params", params, in)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var p struct {
		Mean       []float64
		Covariance [][]float64
	}
	data, _ := os.ReadFile(params)
	json.Unmarshal(data, &p)
	// Commuting covariances: sigma = sum w sigma_k per axis (weights 1/4, 3/4).
	want := []float64{0.25*2 + 0.75*4, 0.25*1 + 0.75*3, 0.25*3 + 0.75*1}
	for i, s := range want {
		if math.Abs(p.Covariance[i][i]-s*s) > 1e-9 || math.Abs(p.Mean[i]-1.5) > 1e-12 {
			t.Errorf("axis %d: var %g mean %g, want %g and 1.5", i, p.Covariance[i][i], p.Mean[i], s*s)
		}
	}
}

// The midpoint of the morph between a blob and its translate is the blob
// moved halfway (McCann's displacement interpolation), not a cross-fade:
// one peak at the midpoint with the blob's height, nothing left at the ends.
func TestMorphMidpointMoves(t *testing.T) {
	dir := t.TempDir()
	a, b := filepath.Join(dir, "a.npy"), filepath.Join(dir, "b.npy")
	fieldfile.Save(a, blob(20, 40, 8, 10, 4), fieldfile.SaveSettings{})
	fieldfile.Save(b, blob(20, 40, 30, 10, 4), fieldfile.SaveSettings{})
	frames := filepath.Join(dir, "frames")
	code, _, errs := runCLI(t, "morph", "--epsilon", "1", "--frames", "3", "--format", "npy", "--out", frames, "--gif", filepath.Join(dir, "m.gif"), a, b)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	mid, err := fieldfile.Load(filepath.Join(frames, "frame_001.npy"), fieldfile.LoadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	m := grid.ComputeMoments(mid)
	// The plain entropic barycenter (the default) blurs by epsilon/2 in
	// variance per axis (Janati, Cuturi, Gramfort 2020): 4 + 1/2.
	if math.Abs(m.Mean[0]-19) > 1e-3 || math.Abs(m.Cov[0][0]-4.5) > 0.1 {
		t.Errorf("midpoint centroid %v variance %v, want x = 19 and variance 4.5", m.Mean, m.Cov)
	}
	ref, _ := grid.Normalize(blob(20, 40, 8, 10, 4))
	_, peak := ref.MinMax()
	peak *= 4 / 4.5 // a 2-D Gaussian's peak falls as 1/variance
	if _, hi := mid.MinMax(); math.Abs(hi-peak) > 0.05*peak {
		t.Errorf("midpoint peak %g, want the blob's %g (a cross-fade would halve it)", hi, peak)
	}
	if v := mid.At(10, 8); v > 1e-3*peak {
		t.Errorf("mass left at the start position: %g", v)
	}
}

func TestDistanceAndMatrix(t *testing.T) {
	dir := t.TempDir()
	files := writeBlobs(t, dir)
	code, out, errs := runCLI(t, "distance", "--epsilon", "1", files[0], files[1])
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	// Translates by (6, 2) px: |tau|^2 = 40 (Sinkhorn divergence of a
	// translate, see sinkhorn.TestDivergenceOfTranslate).
	d, err := strconv.ParseFloat(strings.Fields(out)[0], 64)
	if err != nil || math.Abs(d-40) > 0.05 {
		t.Errorf("divergence %q, want 40", out)
	}
	csvPath := filepath.Join(dir, "m.csv")
	code, _, errs = runCLI(t, append([]string{"distance", "--gauss", "--matrix", "--out", csvPath}, files...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	recs, err := csv.NewReader(strings.NewReader(readFile(t, csvPath))).ReadAll()
	if err != nil || len(recs) != 4 || recs[0][0] != "file" {
		t.Fatalf("matrix %v %v", err, recs)
	}
	// Gaussian W2^2 of translates is the squared shift (Dowson & Landau
	// 1982): the CSV carries the values the blobs' positions give (to 1e-3:
	// the 24 px frame cuts the blobs' tails).
	pos := [][2]float64{{8, 10}, {14, 12}, {11, 16}}
	for i := 1; i < 4; i++ {
		if recs[i][0] != files[i-1] {
			t.Errorf("row %d is %q, want %q", i, recs[i][0], files[i-1])
		}
		for j := 1; j < 4; j++ {
			dx, dy := pos[i-1][0]-pos[j-1][0], pos[i-1][1]-pos[j-1][1]
			v, err := strconv.ParseFloat(recs[i][j], 64)
			if want := dx*dx + dy*dy; err != nil || math.Abs(v-want) > 1e-3*math.Max(want, 1) {
				t.Errorf("entry (%d, %d) = %q, want %g", i, j, recs[i][j], want)
			}
		}
	}
}

func TestRankFlagsOutlier(t *testing.T) {
	dir := t.TempDir()
	var files []string
	for i := 0; i < 7; i++ {
		p := filepath.Join(dir, fmt.Sprintf("c%d.npy", i))
		mx := 12 + 0.5*float64(i%3)
		if i == 6 {
			mx = 26 // far from the others
		}
		fieldfile.Save(p, blob(24, 32, mx, 12, 4), fieldfile.SaveSettings{})
		files = append(files, p)
	}
	rep := filepath.Join(dir, "r.json")
	code, out, errs := runCLI(t, append([]string{"barycenter", "--epsilon", "2", "--rank", "--report", rep}, files...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	lines := strings.Split(out, "\n")
	var flagged []string
	for _, l := range lines {
		if strings.Contains(l, "OUTLIER") {
			flagged = append(flagged, l)
		}
	}
	if len(flagged) != 1 || !strings.Contains(flagged[0], "c6.npy") {
		t.Errorf("flagged %v, want only c6.npy\n%s", flagged, out)
	}
}

func readFile(t *testing.T, p string) string {
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// A mask of the wrong shape is an error that names the mask file.
func TestMaskShapeError(t *testing.T) {
	dir := t.TempDir()
	files := writeBlobs(t, dir)
	mask := filepath.Join(dir, "mask.csv")
	os.WriteFile(mask, []byte("1,1\n1,1\n"), 0o644)
	code, _, errs := runCLI(t, append([]string{"barycenter", "--epsilon", "2", "--mask", mask}, files...)...)
	if code != 1 || !strings.Contains(errs, mask+": sinkhorn: bad input: mask is 2x2, the fields are 24x24") {
		t.Errorf("exit %d, %q", code, errs)
	}
}

// The default barycenter does not depend on when the loop stops: on the
// demo's storm members and nuclei, tolerance 1e-6 and 1e-9 give the same
// field to L1 1e-3 (the plain entropic barycenter is the unique minimiser of
// a strictly convex problem, Benamou et al. 2015), and 1e-9 is reached
// within the iteration cap.
func TestDefaultToleranceIndependent(t *testing.T) {
	sets := map[string][]*grid.Field{"storm": storm(8, 80, 2), "nuclei": floorless(nuclei(12, 64, 1), 30)}
	for name, fs := range sets {
		var out [2]*sinkhorn.Result
		for i, tol := range []float64{1e-6, 1e-9} {
			r, err := sinkhorn.Barycenter(fs, sinkhorn.Settings{Tol: tol})
			if err != nil || r.Status != sinkhorn.Converged {
				t.Fatalf("%s tol %g: %v %v", name, tol, err, r.Message)
			}
			out[i] = r
		}
		var l1 float64
		for i, x := range out[0].Barycenter.Data {
			l1 += math.Abs(x - out[1].Barycenter.Data[i])
		}
		t.Logf("%s: %d and %d iterations, L1 between tol 1e-6 and 1e-9: %.2g", name, out[0].Iterations, out[1].Iterations, l1)
		if l1 > 1e-3 {
			t.Errorf("%s: L1 %g between tolerances 1e-6 and 1e-9", name, l1)
		}
	}
}

// Smoothed debiasing settles where the exact update grows streaks. On the
// demo's storm members at epsilon 41 km^2 (ten squared pixels): the exact
// debiased update (Janati, Cuturi, Gramfort 2020) raises the total
// variation of the field (the sum of absolute differences of neighbours,
// a standard measure of ripple) by a fifth over the sharp plain
// barycenter's within 1000 iterations and keeps raising it; with log d
// averaged at the kernel's scale, tolerance 1e-6 and 1e-9 give the same
// field (L1 <= 1e-3), its total variation is the sharp one's, and it is
// closer to the sharp barycenter (plain, 4 km^2) than the plain one at 41
// km^2 is: the blur removed without the streaks.
func TestSmoothDebiasSettles(t *testing.T) {
	fs := storm(8, 80, 2)
	solve := func(s sinkhorn.Settings) *sinkhorn.Result {
		r, err := sinkhorn.Barycenter(fs, s)
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	tv := func(f *grid.Field) float64 {
		var s float64
		for r := 0; r < f.Rows; r++ {
			for c := 0; c < f.Cols; c++ {
				if c+1 < f.Cols {
					s += math.Abs(f.At(r, c+1) - f.At(r, c))
				}
				if r+1 < f.Rows {
					s += math.Abs(f.At(r+1, c) - f.At(r, c))
				}
			}
		}
		return s
	}
	l1 := func(a, b *grid.Field) float64 {
		var s float64
		for i, x := range a.Data {
			s += math.Abs(x - b.Data[i])
		}
		return s
	}
	sharp := solve(sinkhorn.Settings{Epsilon: 4, Tol: 1e-9})
	blurred := solve(sinkhorn.Settings{Epsilon: 41, Tol: 1e-9})
	exact := solve(sinkhorn.Settings{Epsilon: 41, Debias: true, Tol: 1e-9, MaxIter: 1000})
	var sm [2]*sinkhorn.Result
	for i, tol := range []float64{1e-6, 1e-9} {
		sm[i] = solve(sinkhorn.Settings{Epsilon: 41, SmoothDebias: true, Tol: tol})
		if sm[i].Status != sinkhorn.Converged {
			t.Fatalf("smoothed debiasing, tol %g: %s", tol, sm[i].Message)
		}
	}
	tvSharp := tv(sharp.Barycenter)
	t.Logf("total variation: sharp %.4f, plain 41 km^2 %.4f, exact debiased after 1000 iterations %.4f, smoothed %.4f", tvSharp, tv(blurred.Barycenter), tv(exact.Barycenter), tv(sm[1].Barycenter))
	t.Logf("smoothed: %d and %d iterations, L1 between tolerances %.2g; L1 to the sharp one %.4f (plain 41 km^2: %.4f); d equation residual %.3g",
		sm[0].Iterations, sm[1].Iterations, l1(sm[0].Barycenter, sm[1].Barycenter), l1(sm[1].Barycenter, sharp.Barycenter), l1(blurred.Barycenter, sharp.Barycenter), sm[1].DebiasEquation)
	if tv(exact.Barycenter) < 1.1*tvSharp {
		t.Errorf("the exact debiased field shows no ripple (total variation %.4f against %.4f): the check cannot tell", tv(exact.Barycenter), tvSharp)
	}
	if d := l1(sm[0].Barycenter, sm[1].Barycenter); d > 1e-3 {
		t.Errorf("smoothed debiasing: L1 %g between tolerances 1e-6 and 1e-9", d)
	}
	if v := tv(sm[1].Barycenter); v > 1.05*tvSharp {
		t.Errorf("smoothed debiasing: total variation %.4f, the sharp barycenter's %.4f", v, tvSharp)
	}
	if a, b := l1(sm[1].Barycenter, sharp.Barycenter), l1(blurred.Barycenter, sharp.Barycenter); a > 0.5*b {
		t.Errorf("smoothed debiasing: L1 %.4f to the sharp barycenter, the plain one at the same epsilon %.4f", a, b)
	}
}

// The demo's lightning belongs to its storm members: each member's flash
// core lies just ahead of (at most 3 pixels from) that member's rain peak,
// which it would not if the two drew different cells.
func TestDemoLightningFollowsMembers(t *testing.T) {
	st, li := storm(8, 80, 2), lightning(8, 80, 2)
	argmax := func(f *grid.Field) (int, int) {
		j := 0
		for i, x := range f.Data {
			if x > f.Data[j] {
				j = i
			}
		}
		return j % f.Cols, j / f.Cols
	}
	for k := range st {
		x1, y1 := argmax(st[k])
		x2, y2 := argmax(li[k])
		if d := math.Hypot(float64(x1-x2), float64(y1-y2)); d > 3 {
			t.Errorf("member %d: rain peak (%d, %d), lightning peak (%d, %d)", k+1, x1, y1, x2, y2)
		}
	}
}
