package ensemble_test

import (
	"fmt"
	"math"

	"barygrid/ensemble"
	"barygrid/grid"
	"barygrid/sinkhorn"
)

func spot(mx, my float64) *grid.Field {
	f := grid.New(32, 32)
	for r := 0; r < 32; r++ {
		for c := 0; c < 32; c++ {
			x, y := float64(c)-mx, float64(r)-my
			f.Set(r, c, math.Exp(-(x*x+y*y)/8))
		}
	}
	return f
}

// Rank inputs by their distance to the barycenter; the one far from the
// others is flagged.
func ExampleRankInputs() {
	fs := []*grid.Field{spot(12, 12), spot(13, 12), spot(12, 13), spot(13, 13), spot(24, 24)}
	bary, _ := sinkhorn.Barycenter(fs[:4], sinkhorn.Settings{})
	ranks, err := ensemble.RankInputs(fs, bary.Barycenter, ensemble.DistanceSettings{})
	if err != nil {
		panic(err)
	}
	for _, r := range ranks {
		if r.Outlier {
			fmt.Println("outlier: input", r.Index+1)
		}
	}
	// Output:
	// outlier: input 5
}
