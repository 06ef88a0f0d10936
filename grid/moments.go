package grid

// Moments are the mass-weighted first and second moments of a field in
// physical units.
type Moments struct {
	Mass float64
	// Mean is the centroid (x, y).
	Mean [2]float64
	// Cov is the covariance [[xx, xy], [xy, yy]].
	Cov [2][2]float64
}

// ComputeMoments returns the mass, centroid and covariance of f, treating
// each pixel as a point mass at its centre. Sampling a smooth density this
// way adds nothing to the variance; the pixel-as-uniform-square reading adds
// dx^2/12 per axis (Sheppard's correction, W. F. Sheppard 1898), which
// SheppardCorrect removes or adds explicitly.
func ComputeMoments(f *Field) Moments {
	dx, dy := f.PixelSize()
	var m Moments
	// Two passes (mean, then centred sums) keep the covariance accurate for
	// fields far from the origin.
	var sx, sy, s float64
	for r := 0; r < f.Rows; r++ {
		row := f.Data[r*f.Cols : (r+1)*f.Cols]
		var rs, rx float64
		for c, v := range row {
			rs += v
			rx += v * float64(c)
		}
		s += rs
		sx += rx * dx
		sy += rs * float64(r) * dy
	}
	m.Mass = s
	if s == 0 {
		return m
	}
	mx, my := sx/s, sy/s
	m.Mean = [2]float64{mx, my}
	var xx, xy, yy float64
	for r := 0; r < f.Rows; r++ {
		y := float64(r)*dy - my
		row := f.Data[r*f.Cols : (r+1)*f.Cols]
		for c, v := range row {
			if v == 0 {
				continue
			}
			x := float64(c)*dx - mx
			xx += v * x * x
			xy += v * x * y
			yy += v * y * y
		}
	}
	m.Cov = [2][2]float64{{xx / s, xy / s}, {xy / s, yy / s}}
	return m
}

// SheppardCorrect returns the covariance with Sheppard's correction for
// grouping into cells of width dx, dy subtracted (W. F. Sheppard 1898:
// sigma^2_true ~ sigma^2_grouped - h^2/12). Use it when pixel values are
// integrals over the pixel area of a smooth density.
func SheppardCorrect(cov [2][2]float64, dx, dy float64) [2][2]float64 {
	cov[0][0] -= dx * dx / 12
	cov[1][1] -= dy * dy / 12
	return cov
}
