package grid

import (
	"errors"
	"math"
	"testing"
)

// A uniform disc of radius R has variance R^2/4 along each axis and no
// covariance (standard fact, from memory). Sampled on pixel centres, the
// discretisation error is O(h/R); at R = 60 px it is below 0.5%.
func TestMomentsUniformDisc(t *testing.T) {
	const n, R = 161, 60.0
	f := New(n, n)
	f.Dx, f.Dy = 0.25, 0.25
	for r := 0; r < n; r++ {
		for c := 0; c < n; c++ {
			x, y := float64(c-80), float64(r-80)
			if x*x+y*y <= R*R {
				f.Set(r, c, 1)
			}
		}
	}
	m := ComputeMoments(f)
	want := (R * 0.25) * (R * 0.25) / 4
	for i := 0; i < 2; i++ {
		if got := m.Cov[i][i]; math.Abs(got-want)/want > 5e-3 {
			t.Errorf("var[%d] = %g, want %g (R^2/4)", i, got, want)
		}
	}
	if math.Abs(m.Cov[0][1]) > 1e-9 {
		t.Errorf("cov xy = %g, want 0", m.Cov[0][1])
	}
	if math.Abs(m.Mean[0]-20) > 1e-12 || math.Abs(m.Mean[1]-20) > 1e-12 {
		t.Errorf("centroid %v, want (20, 20) = 80 px * 0.25", m.Mean)
	}
}

// Point samples of a Gaussian density on a grid reproduce its covariance to
// near machine precision once sigma exceeds a pixel (Euler-Maclaurin: the
// sampled sums of a smooth, rapidly decaying function equal the integrals
// up to exponentially small terms; standard fact). Pixel-integrated values
// instead add h^2/12 per axis (Sheppard 1898), which SheppardCorrect removes.
func TestMomentsSampledGaussian(t *testing.T) {
	const n = 96
	sx, sy, rho := 6.0, 4.0, 0.5
	cov := [2][2]float64{{sx * sx, rho * sx * sy}, {rho * sx * sy, sy * sy}}
	det := cov[0][0]*cov[1][1] - cov[0][1]*cov[0][1]
	inv := [2][2]float64{{cov[1][1] / det, -cov[0][1] / det}, {-cov[0][1] / det, cov[0][0] / det}}
	f := New(n, n)
	g := New(n, n) // pixel-integrated by 8x8 sub-sampling
	dens := func(x, y float64) float64 {
		x, y = x-47.3, y-45.6
		return math.Exp(-0.5 * (inv[0][0]*x*x + 2*inv[0][1]*x*y + inv[1][1]*y*y))
	}
	for r := 0; r < n; r++ {
		for c := 0; c < n; c++ {
			f.Set(r, c, dens(float64(c), float64(r)))
			var s float64
			for i := 0; i < 8; i++ {
				for j := 0; j < 8; j++ {
					s += dens(float64(c)-0.5+(float64(j)+0.5)/8, float64(r)-0.5+(float64(i)+0.5)/8)
				}
			}
			g.Set(r, c, s)
		}
	}
	m := ComputeMoments(f)
	for i := 0; i < 2; i++ {
		for j := 0; j < 2; j++ {
			if math.Abs(m.Cov[i][j]-cov[i][j]) > 1e-9 {
				t.Errorf("sampled cov[%d][%d] = %.12g, want %g", i, j, m.Cov[i][j], cov[i][j])
			}
		}
	}
	mg := ComputeMoments(g)
	// Sub-sampling at 8x8 approximates the cell integral: grouping adds
	// (1 - 1/64)/12 per axis here (Sheppard's correction for the sub-cells).
	add := (1 - 1.0/64) / 12
	if d := mg.Cov[0][0] - cov[0][0]; math.Abs(d-add) > 1e-6 {
		t.Errorf("integrated var xx exceeds the density's by %g, want %g (Sheppard)", d, add)
	}
	c := SheppardCorrect(mg.Cov, 1, 1)
	if math.Abs(c[1][1]-cov[1][1]-(add-1.0/12)) > 1e-6 {
		t.Errorf("corrected var yy = %g, want %g", c[1][1], cov[1][1]+add-1.0/12)
	}
}

func TestValidate(t *testing.T) {
	cases := []struct {
		name string
		data []float64
		want error
	}{
		{"ok", []float64{0, 1, 2, 3}, nil},
		{"nan", []float64{0, math.NaN(), 2, 3}, ErrNotFinite},
		{"inf", []float64{0, 1, math.Inf(1), 3}, ErrNotFinite},
		{"negative", []float64{0, 1, 2, -3}, ErrNegative},
		{"zero", []float64{0, 0, 0, 0}, ErrZeroMass},
	}
	for _, tc := range cases {
		f := &Field{Rows: 2, Cols: 2, Data: tc.data}
		err := f.Validate()
		if !errors.Is(err, tc.want) {
			t.Errorf("%s: got %v, want %v", tc.name, err, tc.want)
		}
	}
	f := &Field{Rows: 2, Cols: 2, Data: []float64{1, 1, -1, 1}}
	var pe *PixelError
	if err := f.Validate(); !errors.As(err, &pe) || pe.Row != 1 || pe.Col != 0 {
		t.Errorf("want pixel (1, 0) named, got %v", err)
	}
}

// Resampling keeps the physical moments: a sampled Gaussian of variance 25
// (in the source's pixels) keeps its centroid and variance in physical units
// at the finer grid; linear interpolation adds at most a few percent of a
// source pixel squared (common practice, no source). Mass is restored by
// construction and so not checked here.
func TestResampleKeepsMoments(t *testing.T) {
	f := New(40, 40)
	for r := 0; r < 40; r++ {
		for c := 0; c < 40; c++ {
			x, y := float64(c)-19.5, float64(r)-19.5
			f.Set(r, c, math.Exp(-(x*x+y*y)/50))
		}
	}
	g, err := Resample(f, 79, 79)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(g.Dx-0.5) > 1e-12 {
		t.Errorf("pixel size %g, want 0.5", g.Dx)
	}
	m := ComputeMoments(g)
	if math.Abs(m.Mean[0]-19.5) > 1e-9 || math.Abs(m.Mean[1]-19.5) > 1e-9 {
		t.Errorf("centroid %v, want (19.5, 19.5)", m.Mean)
	}
	for i := 0; i < 2; i++ {
		if math.Abs(m.Cov[i][i]-25) > 0.25 {
			t.Errorf("variance %g, want 25 within 1%%", m.Cov[i][i])
		}
	}
}
