package ensemble

import (
	"math"
	"slices"
	"testing"

	"barygrid/grid"
	"barygrid/sinkhorn"
)

func blob(mx, my, s2 float64) *grid.Field {
	f := grid.New(40, 40)
	for r := 0; r < 40; r++ {
		for c := 0; c < 40; c++ {
			x, y := float64(c)-mx, float64(r)-my
			f.Set(r, c, math.Exp(-(x*x+y*y)/(2*s2)))
		}
	}
	return f
}

// The Sinkhorn divergence between translates is the squared length of the
// translation (translation property of OT with the squared cost; Feydy et
// al. 2019 for the divergence), so the matrix of three translates holds
// |t_i - t_j|^2, and the Gaussian W2 of translates is the same (Dowson &
// Landau 1982).
func TestMatrixOfTranslates(t *testing.T) {
	pos := [][2]float64{{14, 15}, {19, 15}, {16, 21}}
	var fs []*grid.Field
	for _, p := range pos {
		fs = append(fs, blob(p[0], p[1], 6))
	}
	for _, kind := range []Kind{SinkhornDivergence, GaussianW2} {
		m, err := Matrix(fs, DistanceSettings{Kind: kind, Solver: sinkhorn.Settings{Epsilon: 1, Tol: 1e-8}})
		if err != nil {
			t.Fatal(err)
		}
		for i := range pos {
			for j := range pos {
				dx, dy := pos[i][0]-pos[j][0], pos[i][1]-pos[j][1]
				want := dx*dx + dy*dy
				if math.Abs(m[i][j]-want) > 1e-3*math.Max(want, 1) {
					t.Errorf("%v: entry (%d, %d) = %.6g, want %g", kind, i, j, m[i][j], want)
				}
			}
		}
	}
}

// Seven inputs close together and one displaced: Hampel's rule (median + 3
// scaled MAD; Hampel 1974, 1.4826 = 1 / Phi^-1(3/4) makes the MAD consistent
// for the normal standard deviation) flags exactly the displaced one, and
// the scores follow (d - median) / (1.4826 MAD) for the divergences
// returned, with the median taken here by sorting, not by the package.
func TestRankFlagsTheDisplacedInput(t *testing.T) {
	var fs []*grid.Field
	for k := 0; k < 7; k++ {
		fs = append(fs, blob(18+0.7*float64(k%3), 19+0.6*float64(k%2), 6))
	}
	fs = append(fs, blob(30, 30, 6))
	bary, err := sinkhorn.Barycenter(fs[:7], sinkhorn.Settings{Epsilon: 1})
	if err != nil {
		t.Fatal(err)
	}
	rs, err := RankInputs(fs, bary.Barycenter, DistanceSettings{Solver: sinkhorn.Settings{Epsilon: 1}})
	if err != nil {
		t.Fatal(err)
	}
	ds := make([]float64, len(rs))
	for i, r := range rs {
		ds[i] = r.Divergence
	}
	// Eight values: the median is the mean of the 4th and 5th smallest.
	mid := func(x []float64) float64 {
		y := slices.Clone(x)
		slices.Sort(y)
		return (y[3] + y[4]) / 2
	}
	med := mid(ds)
	dev := make([]float64, len(ds))
	for i, d := range ds {
		dev[i] = math.Abs(d - med)
	}
	scale := 1.4826 * mid(dev)
	for _, r := range rs {
		if r.Outlier != (r.Index == 7) {
			t.Errorf("input %d: outlier %v (divergence %.3g, score %.2f)", r.Index, r.Outlier, r.Divergence, r.Score)
		}
		if want := (r.Divergence - med) / scale; math.Abs(r.Score-want) > 1e-3*math.Max(1, math.Abs(want)) {
			t.Errorf("input %d: score %g, want %g", r.Index, r.Score, want)
		}
	}
	if rs[0].Index != 7 {
		t.Errorf("largest divergence is input %d, want the displaced 7", rs[0].Index)
	}
}

// The midpoint of the displacement interpolation between translates is the
// blob moved halfway (McCann 1997), blurred by epsilon/2 in variance per
// axis by the plain entropic barycenter; the ends are the inputs.
func TestMorphMidpoint(t *testing.T) {
	a, b := blob(10, 20, 5), blob(28, 14, 5)
	r, err := Morph(a, b, MorphSettings{Frames: 3, Solver: sinkhorn.Settings{Epsilon: 1, Tol: 1e-8}})
	if err != nil {
		t.Fatal(err)
	}
	m := grid.ComputeMoments(r.Frames[1])
	if math.Abs(m.Mean[0]-19) > 1e-3 || math.Abs(m.Mean[1]-17) > 1e-3 {
		t.Errorf("midpoint centroid %v, want (19, 17)", m.Mean)
	}
	for i := 0; i < 2; i++ {
		if math.Abs(m.Cov[i][i]-5.5) > 0.05 {
			t.Errorf("midpoint variance %g, want 5 + 1/2", m.Cov[i][i])
		}
	}
	na, _ := grid.Normalize(a)
	for i, v := range r.Frames[0].Data {
		if v != na.Data[i] {
			t.Fatalf("first frame differs from the input at %d", i)
		}
	}
}

// The pixel mean of two normalised fields is their average pixel by pixel.
func TestPixelMean(t *testing.T) {
	a, b := grid.New(2, 2), grid.New(2, 2)
	a.Data = []float64{2, 0, 0, 2}
	b.Data = []float64{0, 0, 0, 5}
	m, err := PixelMean([]*grid.Field{a, b})
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{0.25, 0, 0, 0.75}
	for i := range want {
		if math.Abs(m.Data[i]-want[i]) > 1e-15 {
			t.Errorf("pixel %d: %g, want %g", i, m.Data[i], want[i])
		}
	}
	if _, err := PixelMean([]*grid.Field{a, grid.New(2, 2)}); err == nil {
		t.Error("a field without mass was accepted")
	}
}
