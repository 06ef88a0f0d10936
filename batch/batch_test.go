package batch

import (
	"barygrid/sinkhorn"
	"fmt"
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
