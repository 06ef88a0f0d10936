package batch

import (
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/sinkhorn"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Shards spread groups evenly and do not depend on which other groups
// exist: 400 names over 4 shards give each between 70 and 130 (a binomial
// count of mean 100 and deviation 8.7 stays there with overwhelming
// probability for a hash that mixes well; a constant or a length-based
// assignment fails), and a name keeps its shard when others are added.
func TestShardSpread(t *testing.T) {
	count := make([]int, 4)
	for g := 0; g < 400; g++ {
		name := fmt.Sprintf("sample-%03d", g)
		hits := 0
		for i := 1; i <= 4; i++ {
			if InShard(name, i, 4) {
				count[i-1]++
				hits++
			}
		}
		if hits != 1 {
			t.Fatalf("%s in %d shards", name, hits)
		}
	}
	for i, c := range count {
		if c < 70 || c > 130 {
			t.Errorf("shard %d/4 holds %d of 400 groups", i+1, c)
		}
	}
}

// A NetCDF file at the top of the input folder is a group whose planes are
// the inputs (testdata/nc_cdf1.nc: two times, written by SciPy).
func TestNetCDFStackIsAGroup(t *testing.T) {
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in"), filepath.Join(dir, "out")
	os.MkdirAll(in, 0o755)
	data, err := os.ReadFile(filepath.Join("..", "testdata", "nc_cdf1.nc"))
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile(filepath.Join(in, "rain.nc"), data, 0o644)
	groups, err := Discover(in)
	if err != nil || len(groups) != 1 || groups[0].Name != "rain" {
		t.Fatalf("%v %+v", err, groups)
	}
	os.MkdirAll(out, 0o755)
	rows := Run(groups, Job{Out: out, Solver: sinkhorn.Settings{Epsilon: 2}, Key: map[string]any{}}, RunSettings{})
	if rows[0].Status != "ok" || rows[0].Inputs != 2 {
		t.Fatalf("%+v", rows[0])
	}
	rep, _ := os.ReadFile(filepath.Join(out, "rain", "report.json"))
	if !strings.Contains(string(rep), "rain.nc[time=1]") {
		t.Errorf("report does not name the planes: %.300s", rep)
	}
}

// A manifest's carry column names a second field per input: the group gets
// carried.npy, the second channels moved into the template and averaged
// (for shifts of one pair, that pair's second channel shifted: its
// centroid at the mean of theirs), and a changed carried file recomputes
// the group.
func TestManifestCarry(t *testing.T) {
	dir := t.TempDir()
	var lines []string
	lines = append(lines, "group,file,carry")
	for k, s := range [][2]float64{{0, 0}, {6, 2}, {3, 4}} {
		a, b := grid.New(28, 28), grid.New(28, 28)
		for i := range a.Data {
			x, y := float64(i%28)-9-s[0], float64(i/28)-10-s[1]
			a.Data[i] = math.Exp(-(x*x + y*y) / 12)
			x2 := x - 2
			b.Data[i] = math.Exp(-(x2*x2 + y*y) / 4)
		}
		an, bn := fmt.Sprintf("n%d.npy", k), fmt.Sprintf("p%d.npy", k)
		fieldfile.Save(filepath.Join(dir, an), a, fieldfile.SaveSettings{})
		fieldfile.Save(filepath.Join(dir, bn), b, fieldfile.SaveSettings{})
		lines = append(lines, "cells,"+an+","+bn)
	}
	man := filepath.Join(dir, "m.csv")
	os.WriteFile(man, []byte(strings.Join(lines, "\n")+"\n"), 0o644)
	groups, err := ReadManifest(man)
	if err != nil || len(groups) != 1 || len(groups[0].Carry) != 3 {
		t.Fatalf("%v %+v", err, groups)
	}
	out := filepath.Join(dir, "out")
	os.MkdirAll(out, 0o755)
	job := Job{Out: out, Solver: sinkhorn.Settings{Epsilon: 0.25}, Key: map[string]any{}}
	if rows := Run(groups, job, RunSettings{}); rows[0].Status != "ok" {
		t.Fatalf("%+v", rows[0])
	}
	c, err := fieldfile.Load(filepath.Join(out, "cells", "carried.npy"), fieldfile.LoadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	m := grid.ComputeMoments(c)
	if math.Abs(m.Mean[0]-14) > 0.15 || math.Abs(m.Mean[1]-12) > 0.15 {
		t.Errorf("carried centroid %v, want (14, 12)", m.Mean)
	}
	if rows := Run(groups, job, RunSettings{}); rows[0].Status != "skipped" {
		t.Errorf("unchanged rerun: %s", rows[0].Status)
	}
	b, _ := fieldfile.Load(filepath.Join(dir, "p0.npy"), fieldfile.LoadSettings{})
	b.Data[0] += 1
	fieldfile.Save(filepath.Join(dir, "p0.npy"), b, fieldfile.SaveSettings{Force: true})
	if rows := Run(groups, job, RunSettings{}); rows[0].Status != "ok" {
		t.Errorf("rerun with a changed carried file: %s", rows[0].Status)
	}
}
