package report

import (
	"encoding/json"
	"regexp"
	"testing"

	"barygrid/ensemble"
	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/sinkhorn"

	"gonum.org/v1/gonum/mat"
)

// One style of keys in every report: snake_case (common practice, no
// source; the issue that asked for it found ellipse.Major among them).
func TestKeysAreSnakeCase(t *testing.T) {
	f := grid.New(24, 24)
	f.Set(3, 3, 1)
	g := grid.New(24, 24)
	g.Set(4, 5, 1)
	r, err := sinkhorn.Barycenter([]*grid.Field{f, g}, sinkhorn.Settings{Weights: []float64{1, 3}})
	if err != nil {
		t.Fatal(err)
	}
	b := NewBarycenter([]string{"a", "b"}, []*grid.Field{f, g}, []float64{1, 3}, sinkhorn.Settings{}, r)
	gr, err := gaussfit.Barycenter([]gaussfit.Gaussian{{Mean: []float64{0, 0}, Cov: mat.NewSymDense(2, []float64{2, 0, 0, 1})}}, gaussfit.Settings{})
	if err != nil {
		t.Fatal(err)
	}
	snake := regexp.MustCompile(`^[a-z][a-z0-9_]*$`)
	d := NewDistance("a", "b", "um", ensemble.Distance{Value: 1, Kind: ensemble.SinkhornDivergence, Epsilon: 1, Iterations: []int{1, 2, 3}}, sinkhorn.Settings{Tol: 1e-6})
	for _, v := range []any{b, NewGaussian(gr, "fixed-point", 1), NewField("a", f), d} {
		data, _ := json.Marshal(v)
		var m any
		json.Unmarshal(data, &m)
		var walk func(any)
		walk = func(x any) {
			switch x := x.(type) {
			case map[string]any:
				for k, v := range x {
					if !snake.MatchString(k) {
						t.Errorf("key %q", k)
					}
					walk(v)
				}
			case []any:
				for _, v := range x {
					walk(v)
				}
			}
		}
		walk(m)
	}
	// Resolved values: the default epsilon (one squared pixel), weights
	// normalised.
	if b.Epsilon != 1 || b.EpsilonGiven || b.Inputs[1].Weight != 0.75 || b.Tol != 1e-6 {
		t.Errorf("epsilon %g given %v, weight %g, tol %g", b.Epsilon, b.EpsilonGiven, b.Inputs[1].Weight, b.Tol)
	}
}
