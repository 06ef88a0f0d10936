package batch_test

import (
	"fmt"
	"math"
	"os"
	"path/filepath"

	"barygrid/batch"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/sinkhorn"
)

// Average every subfolder of a folder into OUT/GROUP, as the batch command
// does.
func ExampleRun() {
	dir, _ := os.MkdirTemp("", "batch")
	defer os.RemoveAll(dir)
	for _, g := range []string{"cells", "storms"} {
		os.MkdirAll(filepath.Join(dir, "in", g), 0o755)
		for k := 0; k < 3; k++ {
			f := grid.New(24, 24)
			for i := range f.Data {
				x, y := float64(i%24)-8-2*float64(k), float64(i/24)-10
				f.Data[i] = math.Exp(-(x*x + y*y) / 8)
			}
			fieldfile.Save(filepath.Join(dir, "in", g, fmt.Sprintf("f%d.npy", k)), f, fieldfile.SaveSettings{})
		}
	}
	groups, err := batch.Discover(filepath.Join(dir, "in"))
	if err != nil {
		panic(err)
	}
	job := batch.Job{Out: filepath.Join(dir, "out"), Solver: sinkhorn.Settings{Epsilon: 2}, Key: map[string]any{"epsilon": 2}}
	os.MkdirAll(job.Out, 0o755)
	for _, r := range batch.Run(groups, job, batch.RunSettings{}) {
		fmt.Println(r.Group, r.Status, r.Inputs)
	}
	// Output:
	// cells ok 3
	// storms ok 3
}
