package gaussfit

import (
	"fmt"
	"math"

	"barygrid/grid"

	"gonum.org/v1/gonum/mat"
)

// FitSettings control Fit; the zero value fits raw moments.
type FitSettings struct {
	// Sheppard subtracts dx^2/12 and dy^2/12 from the variances, for pixel
	// values that integrate a density over the pixel (Sheppard 1898).
	Sheppard bool
	// BackgroundPercentile ignores values below this percentile (0..100) by
	// subtracting it before the moments, so a camera floor does not widen
	// the fit.
	BackgroundPercentile float64
}

// Fit returns the Gaussian with the field's mass-weighted mean and
// covariance in physical units, and the field's mass.
func Fit(f *grid.Field, s FitSettings) (Gaussian, float64, error) {
	if s.BackgroundPercentile > 0 {
		f = grid.SubtractBackground(f, grid.Percentile(f, s.BackgroundPercentile))
	}
	if err := f.Validate(); err != nil {
		return Gaussian{}, 0, fmt.Errorf("gaussfit: %w", err)
	}
	m := grid.ComputeMoments(f)
	c := m.Cov
	if s.Sheppard {
		dx, dy := f.PixelSize()
		c = grid.SheppardCorrect(c, dx, dy)
	}
	cov, err := CheckCov([][]float64{{c[0][0], c[0][1]}, {c[1][0], c[1][1]}}, 2)
	if err != nil {
		return Gaussian{}, 0, fmt.Errorf("gaussfit: field is degenerate (a line or a point): %w", err)
	}
	return Gaussian{Mean: []float64{m.Mean[0], m.Mean[1]}, Cov: cov}, m.Mass, nil
}

// Ellipse is the one-sigma ellipse of a 2-D Gaussian: semi-axes (major
// first) and the angle of the major axis from +x, in radians, y downwards
// as rows grow.
type Ellipse struct {
	CX, CY       float64
	Major, Minor float64
	Angle        float64
}

// EllipseOf returns the one-sigma ellipse of a 2-D Gaussian.
func EllipseOf(g Gaussian) Ellipse {
	a, b, c := g.Cov.At(0, 0), g.Cov.At(0, 1), g.Cov.At(1, 1)
	tr, det := a+c, a*c-b*b
	disc := math.Sqrt(math.Max(0, tr*tr/4-det))
	l1, l2 := tr/2+disc, tr/2-disc
	return Ellipse{CX: g.Mean[0], CY: g.Mean[1], Major: math.Sqrt(math.Max(l1, 0)), Minor: math.Sqrt(math.Max(l2, 0)),
		Angle: 0.5 * math.Atan2(2*b, a-c)}
}

// Render draws a 2-D Gaussian on a rows x cols grid with the given pixel
// size, scaled to the given mass.
func Render(g Gaussian, rows, cols int, dx, dy, mass float64) *grid.Field {
	f := grid.New(rows, cols)
	f.Dx, f.Dy = dx, dy
	var inv mat.SymDense
	var ch mat.Cholesky
	if !ch.Factorize(g.Cov) {
		return f
	}
	ch.InverseTo(&inv)
	for r := 0; r < rows; r++ {
		for c := 0; c < cols; c++ {
			x, y := float64(c)*dx-g.Mean[0], float64(r)*dy-g.Mean[1]
			q := inv.At(0, 0)*x*x + 2*inv.At(0, 1)*x*y + inv.At(1, 1)*y*y
			f.Set(r, c, math.Exp(-q/2))
		}
	}
	if s := f.Mass(); s > 0 {
		for i := range f.Data {
			f.Data[i] *= mass / s
		}
	}
	return f
}
