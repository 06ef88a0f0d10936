package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"barygrid/grid"
	"barygrid/io/fieldfile"
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
		{[]string{"gauss", "--solver", "newton", files[0]}, 2, "--solver"},
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
