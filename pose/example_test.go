package pose_test

import (
	"fmt"
	"math"

	"barygrid/grid"
	"barygrid/pose"
	"barygrid/sinkhorn"
)

// Elongated cells lying at different angles: posed first, their template
// is elongated too. Their shape is symmetric under a half-turn, so the
// third one (130 degrees) reads as -50, and the angles are relative to the
// mean pose, 10 degrees.
func ExampleNormalize() {
	var fs []*grid.Field
	for _, a := range []float64{10, 70, 130} {
		f := grid.New(32, 32)
		th := a * math.Pi / 180
		for i := range f.Data {
			u, v := float64(i%32)-16, -(float64(i/32) - 16)
			u0, v0 := math.Cos(th)*u+math.Sin(th)*v, -math.Sin(th)*u+math.Cos(th)*v
			f.Data[i] = math.Exp(-u0*u0/32 - v0*v0/4)
		}
		fs = append(fs, f)
	}
	r, err := pose.Normalize(fs, pose.Settings{Mode: pose.Rotate, Solver: sinkhorn.Settings{Epsilon: 1}})
	if err != nil {
		panic(err)
	}
	for _, t := range r.Transforms {
		fmt.Printf("%.0f degrees\n", t.AngleDeg)
	}
	// Output:
	// 0 degrees
	// 60 degrees
	// -60 degrees
}
