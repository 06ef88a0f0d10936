package sinkhorn

import (
	"math"
	"testing"

	"barygrid/grid"
)

// The barycentric map of translates is the translation (a standard fact of
// optimal transport: the optimal map between translates is x -> x + t),
// to a fraction of a pixel in the barycenter's core (above a tenth of its
// peak); the spread is the variance of the shifts, sum_k w_k |t_k - mean
// t|^2, to 1%. Both carry the plain barycenter's blur of epsilon/2 in
// variance: the map from the blurred barycenter to a sharp input contracts
// about the centre (sqrt(6 / 6.125) at epsilon 0.25, 0.1% of the spread).
func TestMapsOfTranslates(t *testing.T) {
	shifts := [][2]float64{{14, 16}, {22, 15}, {18, 25}}
	w := []float64{0.5, 0.3, 0.2}
	var fs []*grid.Field
	var mx, my float64
	for i, s := range shifts {
		fs = append(fs, gaussField(44, 40, s[0], s[1], 6))
		mx += w[i] * s[0]
		my += w[i] * s[1]
	}
	s := Settings{Epsilon: 0.25, Weights: w, Tol: 1e-9}
	r, err := Barycenter(fs, s)
	if err != nil || r.Status != Converged {
		t.Fatal(err, r.Message)
	}
	v, err := Maps(fs, s, r)
	if err != nil {
		t.Fatal(err)
	}
	var variance float64
	for k, sh := range shifts {
		tx, ty := sh[0]-mx, sh[1]-my
		variance += w[k] * (tx*tx + ty*ty)
		d := v.Displacements[k]
		worst := 0.0
		for j, b := range r.Barycenter.Data {
			if b < 0.1*maxOf(r.Barycenter.Data) {
				continue
			}
			worst = math.Max(worst, math.Hypot(d.X.Data[j]-tx, d.Y.Data[j]-ty))
		}
		t.Logf("input %d: largest error of the displacement in the core %.3g px", k+1, worst)
		if worst > 0.25 {
			t.Errorf("input %d: displacement off the translation (%.2f, %.2f) by up to %.3g px", k+1, tx, ty, worst)
		}
	}
	t.Logf("spread %.5g, variance of the shifts %.5g", v.Spread, variance)
	if math.Abs(v.Spread-variance) > 0.01*variance {
		t.Errorf("spread %.6g, want the variance of the shifts %.6g", v.Spread, variance)
	}
}

func maxOf(x []float64) float64 {
	m := math.Inf(-1)
	for _, v := range x {
		m = math.Max(m, v)
	}
	return m
}

// For Gaussian inputs the barycentric map approaches the closed-form affine
// map between the barycenter's Gaussian and the input's (Dowson & Landau
// 1982; Knott & Smith 1984) as epsilon decreases: T(y) = m_k + A (y - m),
// with A = S^{-1/2} (S^{1/2} S_k S^{1/2})^{1/2} S^{-1/2}. For axis-aligned
// covariances the barycenter's standard deviations are the weighted means
// of the inputs' and A is diagonal with ratios of standard deviations.
func TestMapsApproachGaussianMap(t *testing.T) {
	a := anisoGauss(48, 48, 18, 22, 9, 4)
	b := anisoGauss(48, 48, 28, 26, 3, 12)
	fs := []*grid.Field{a, b}
	// Barycenter standard deviations: (3+sqrt3)/2 and (2+sqrt12)/2.
	sx, sy := (3+math.Sqrt(3))/2, (2+math.Sqrt(12))/2
	mx, my := 23.0, 24.0
	prev := math.Inf(1)
	for _, eps := range []float64{4, 1, 0.5} {
		s := Settings{Epsilon: eps, Tol: 1e-9}
		r, err := Barycenter(fs, s)
		if err != nil || r.Status != Converged {
			t.Fatal(err, r.Message)
		}
		v, err := Maps(fs, s, r)
		if err != nil {
			t.Fatal(err)
		}
		d := v.Displacements[1] // to b: A = diag(sqrt3/sx, sqrt12/sy)
		ax, ay := math.Sqrt(3)/sx, math.Sqrt(12)/sy
		var errSum, wSum float64
		for j, w := range r.Barycenter.Data {
			x, y := float64(j%48), float64(j/48)
			// Inside one standard deviation of the barycenter, away from
			// where the grid cuts the tails.
			if (x-mx)*(x-mx)/(sx*sx)+(y-my)*(y-my)/(sy*sy) > 1 {
				continue
			}
			wx := 28 + ax*(x-mx) - x
			wy := 26 + ay*(y-my) - y
			errSum += w * math.Hypot(d.X.Data[j]-wx, d.Y.Data[j]-wy)
			wSum += w
		}
		e := errSum / wSum
		t.Logf("eps %g: mean error of the map against the Gaussian one %.4f px", eps, e)
		if e >= prev {
			t.Errorf("eps %g: error %.4f did not fall (before %.4f)", eps, e, prev)
		}
		prev = e
	}
	if prev > 0.1 {
		t.Errorf("at eps 0.5 the map is %.3f px from the Gaussian map", prev)
	}
}

func anisoGauss(rows, cols int, mx, my, vx, vy float64) *grid.Field {
	f := grid.New(rows, cols)
	for r := 0; r < rows; r++ {
		for c := 0; c < cols; c++ {
			x, y := float64(c)-mx, float64(r)-my
			f.Set(r, c, math.Exp(-x*x/(2*vx)-y*y/(2*vy)))
		}
	}
	return f
}

// Inputs that are exact shifts of one pair (a shape and a second channel
// beside it, shifted together): the carried average is the pair's second
// channel shifted by the mean shift (the barycentric map of translates is
// the translation), up to the entropic blur; a cross-fade of the second
// channels would instead show ghosts at each input's place.
func TestCarryShiftedPair(t *testing.T) {
	// The mean shift (3, 3) is whole pixels: at epsilon below a squared
	// pixel the plan is nearly an assignment between lattice points, and a
	// fractional mean shift would be rounded (measured: 0.3 px at 0.1).
	shifts := [][2]float64{{0, 0}, {7, 3}, {2, 6}}
	var fs, cs []*grid.Field
	var mx, my float64
	for _, s := range shifts {
		fs = append(fs, gaussField(48, 48, 16+s[0], 18+s[1], 8))
		// The second channel: a smaller spot to the right of the shape.
		cs = append(cs, gaussField(48, 48, 19+s[0], 18+s[1], 2))
		mx += s[0] / 3
		my += s[1] / 3
	}
	s := Settings{Epsilon: 0.25, Tol: 1e-9}
	r, err := Barycenter(fs, s)
	if err != nil || r.Status != Converged {
		t.Fatal(err, r.Message)
	}
	got, err := Carry(fs, cs, s, r)
	if err != nil {
		t.Fatal(err)
	}
	want := gaussField(48, 48, 19+mx, 18+my, 2)
	var diff, norm float64
	for j, b := range r.Barycenter.Data {
		if b < 0.1*maxOf(r.Barycenter.Data) {
			continue // the carried value is read where the shape has mass
		}
		diff += math.Abs(got.Data[j] - want.Data[j])
		norm += want.Data[j]
	}
	t.Logf("relative L1 of the carried channel against the shifted one: %.3g", diff/norm)
	if diff/norm > 0.05 {
		t.Errorf("carried channel differs from the shifted pair's by %.3g (relative L1)", diff/norm)
	}
}
