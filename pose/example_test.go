package pose_test

import (
	"fmt"
	"math"

	"barygrid/grid"
	"barygrid/pose"
	"barygrid/sinkhorn"
)

// Elongated cells lying at different angles (variances 16 and 2 along and
// across): posed first, their template is elongated too (plus the blur of
// epsilon/2 per axis); averaged as they lie it would be nearly round.
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
	m := grid.ComputeMoments(r.Template)
	tr, det := m.Cov[0][0]+m.Cov[1][1], m.Cov[0][0]*m.Cov[1][1]-m.Cov[0][1]*m.Cov[1][0]
	big, small := tr/2+math.Sqrt(tr*tr/4-det), tr/2-math.Sqrt(tr*tr/4-det)
	fmt.Printf("template variances %.0f and %.0f\n", big, small)
	// Output:
	// template variances 17 and 3

}
