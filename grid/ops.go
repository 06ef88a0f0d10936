package grid

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/interp"
)

// Crop returns the sub-field of rows [r0, r1) and columns [c0, c1).
func Crop(f *Field, r0, c0, r1, c1 int) (*Field, error) {
	if r0 < 0 || c0 < 0 || r1 > f.Rows || c1 > f.Cols || r0 >= r1 || c0 >= c1 {
		return nil, fmt.Errorf("grid: crop [%d:%d, %d:%d] outside a %d x %d field", r0, r1, c0, c1, f.Rows, f.Cols)
	}
	g := *f
	g.Rows, g.Cols = r1-r0, c1-c0
	g.Data = make([]float64, g.Rows*g.Cols)
	for r := r0; r < r1; r++ {
		copy(g.Data[(r-r0)*g.Cols:], f.Data[r*f.Cols+c0:r*f.Cols+c1])
	}
	return &g, nil
}

// Invert returns max(f) - f, for dark objects on a light background.
func Invert(f *Field) *Field {
	_, hi := f.MinMax()
	g := f.Like()
	for i, v := range f.Data {
		g.Data[i] = hi - v
	}
	return g
}

// Percentile returns the p-th percentile (0..100) of the values, by linear
// interpolation between order statistics (common practice, no source).
func Percentile(f *Field, p float64) float64 {
	s := append([]float64(nil), f.Data...)
	sort.Float64s(s)
	if len(s) == 0 {
		return math.NaN()
	}
	p = math.Max(0, math.Min(100, p))
	pos := p / 100 * float64(len(s)-1)
	i := int(pos)
	if i >= len(s)-1 {
		return s[len(s)-1]
	}
	t := pos - float64(i)
	return s[i]*(1-t) + s[i+1]*t
}

// SubtractBackground returns max(f - level, 0).
func SubtractBackground(f *Field, level float64) *Field {
	g := f.Like()
	for i, v := range f.Data {
		g.Data[i] = math.Max(v-level, 0)
	}
	return g
}

// Resample returns f resampled to rows x cols by separable piecewise-linear
// interpolation (gonum interp) over the same physical extent of pixel
// centres, then rescaled to keep the mass. Resampling is a choice the user
// makes explicitly: it blurs by up to one source pixel.
func Resample(f *Field, rows, cols int) (*Field, error) {
	if rows < 2 || cols < 2 || f.Rows < 2 || f.Cols < 2 {
		return nil, fmt.Errorf("grid: cannot resample %d x %d to %d x %d (need at least 2 x 2)", f.Rows, f.Cols, rows, cols)
	}
	if rows == f.Rows && cols == f.Cols {
		return f.Clone(), nil
	}
	dx, dy := f.PixelSize()
	sx := float64(f.Cols-1) / float64(cols-1)
	sy := float64(f.Rows-1) / float64(rows-1)
	tmp := make([]float64, f.Rows*cols)
	line := func(src []float64, n int, scale float64, dst []float64) {
		xs := make([]float64, len(src))
		for i := range xs {
			xs[i] = float64(i)
		}
		var pl interp.PiecewiseLinear
		_ = pl.Fit(xs, src) // xs strictly increasing, lengths equal: cannot fail
		for i := 0; i < n; i++ {
			dst[i] = pl.Predict(math.Min(float64(i)*scale, xs[len(xs)-1]))
		}
	}
	for r := 0; r < f.Rows; r++ {
		line(f.Data[r*f.Cols:(r+1)*f.Cols], cols, sx, tmp[r*cols:(r+1)*cols])
	}
	g := &Field{Rows: rows, Cols: cols, Data: make([]float64, rows*cols), Dx: dx * sx, Dy: dy * sy, Unit: f.Unit}
	col := make([]float64, f.Rows)
	out := make([]float64, rows)
	for c := 0; c < cols; c++ {
		for r := 0; r < f.Rows; r++ {
			col[r] = tmp[r*cols+c]
		}
		line(col, rows, sy, out)
		for r := 0; r < rows; r++ {
			g.Data[r*cols+c] = math.Max(out[r], 0)
		}
	}
	if m0, m1 := f.Mass(), g.Mass(); m1 > 0 {
		for i := range g.Data {
			g.Data[i] *= m0 / m1
		}
	}
	return g, nil
}
